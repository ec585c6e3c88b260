package metrics

import (
	"math"
	"slices"

	"github.com/prometheus/client_golang/prometheus"
	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/tune"
)

// snapshotCollector reads the service's latest snapshot at every scrape (prometheus.Collector).
// Snapshot is a pointer load: a scrape never waits for the tuner, and never touches hardware.
type snapshotCollector struct {
	svc    *controller.Service
	states []tune.State // every state of the tune state machine, sorted

	swr, forward, reflected *prometheus.Desc
	position, trusted       *prometheus.Desc
	freq, busy, state       *prometheus.Desc
	mapPoints, fault        *prometheus.Desc
	radioFreq, radioStale   *prometheus.Desc
}

func newSnapshotCollector(svc *controller.Service) *snapshotCollector {
	desc := func(name, help string, labels ...string) *prometheus.Desc {
		return prometheus.NewDesc(prometheus.BuildFQName(namespace, "", name), help, labels, nil)
	}
	var states []tune.State
	for s := range tune.Transitions() {
		states = append(states, s)
	}
	slices.Sort(states)
	return &snapshotCollector{
		svc:       svc,
		states:    states,
		swr:       desc("swr", "Standing-wave ratio at the motor's position: the latest reading during an operation, the verified one at rest."),
		forward:   desc("forward_power_watts", "Forward power of the running operation's latest coupler reading."),
		reflected: desc("reflected_power_watts", "Reflected power of the running operation's latest coupler reading."),
		position:  desc("motor_position_steps", "The motor's commanded position, in microsteps."),
		trusted:   desc("position_trusted", "1 if the motor's position is trusted (homed or referenced), else 0."),
		freq:      desc("frequency_hertz", "Frequency of the running operation, or of the last one."),
		busy:      desc("busy", "1 while an operation runs, else 0."),
		state:     desc("tuner_state", "1 for the tuner's current state, 0 for the others.", "state"),
		mapPoints: desc("memory_map_points", "Points in the frequency-to-position memory map."),
		fault:     desc("fault_latched", "1 while a fault is latched (nothing moves or transmits until a reset), else 0."),
		radioFreq: desc("radio_frequency_hertz", "Frequency the radio last reported."),
		radioStale: desc("radio_stale",
			"1 if the radio's frequency source has been silent for longer than the follower allows, else 0."),
	}
}

// Describe implements prometheus.Collector.
func (c *snapshotCollector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{c.swr, c.forward, c.reflected, c.position, c.trusted, c.freq,
		c.busy, c.state, c.mapPoints, c.fault, c.radioFreq, c.radioStale} {
		ch <- d
	}
}

// Collect implements prometheus.Collector.
func (c *snapshotCollector) Collect(ch chan<- prometheus.Metric) {
	sn := c.svc.Snapshot()
	gauge := func(d *prometheus.Desc, v float64, labels ...string) {
		m, err := prometheus.NewConstMetric(d, prometheus.GaugeValue, v, labels...)
		if err != nil {
			m = prometheus.NewInvalidMetric(d, err)
		}
		ch <- m
	}
	if v, ok := swr(sn); ok {
		gauge(c.swr, v)
	}
	if sn.Busy && !sn.Live.At.IsZero() {
		gauge(c.forward, watts(sn.Live.Forward))
		gauge(c.reflected, watts(sn.Live.Reflected))
	}
	gauge(c.position, float64(sn.Axis.Position))
	gauge(c.trusted, flag(sn.Axis.Trusted))
	if sn.Freq > 0 {
		gauge(c.freq, hertz(sn.Freq))
	}
	gauge(c.busy, flag(sn.Busy))
	for _, s := range c.states {
		gauge(c.state, flag(s == sn.State), string(s))
	}
	gauge(c.mapPoints, float64(sn.MapPoints))
	gauge(c.fault, flag(sn.Fault != ""))
	if sn.Radio.Freq > 0 {
		gauge(c.radioFreq, hertz(sn.Radio.Freq))
	}
	gauge(c.radioStale, flag(sn.Radio.Stale))
}

// swr is the SWR at the motor's position as the snapshot knows it: during an operation the
// latest reading of that operation; at rest the last operation's verified SWR, or else its
// latest reading. Not ok when there is none, or the reading measured no carrier (NaN).
func swr(sn controller.Snapshot) (float64, bool) {
	read := !sn.Live.At.IsZero()
	v := math.NaN()
	switch {
	case sn.Busy && read:
		v = sn.Live.SWR
	case sn.Busy:
	case sn.Last != nil && sn.Last.SWR > 0:
		v = sn.Last.SWR
	case read:
		v = sn.Live.SWR
	}
	return v, v >= 1 // an SWR is at least 1; NaN fails too
}

func flag(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

func watts(p physic.Power) float64 { return float64(p) / float64(physic.Watt) }

func hertz(f physic.Frequency) float64 { return float64(f) / float64(physic.Hertz) }

package metrics_test

import (
	"context"
	"fmt"
	"math"
	"net/http"
	"net/http/httptest"
	"runtime"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil"
	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/metrics"
	"github.com/tankd/tankd/controller/tune"
)

// Frequencies the tests use: on 80 m and 40 m, where the fake loop tunes.
var (
	f80  = 3750 * physic.KiloHertz
	f80b = 3700 * physic.KiloHertz
	f40  = 7100 * physic.KiloHertz
)

// rig is a service on a fake loop, with its metrics.
type rig struct {
	*fakeservice.Rig
	m *metrics.Metrics
}

func newRig(t *testing.T, mo metrics.Options) *rig {
	t.Helper()
	r := &rig{Rig: fakeservice.New(t, fakeservice.Options{})}
	m, err := metrics.New(r.Service, mo)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(m.Close)
	r.m = m
	return r
}

// startMetrics runs the metrics' Run; after stop, every event published before it is counted.
func (r *rig) startMetrics(t *testing.T) (stop func()) {
	t.Helper()
	return fakeservice.Go(t, "metrics", r.m.Run)
}

// run submits q, waits for it, and checks its outcome.
func (r *rig) run(t *testing.T, q controller.Request, want tune.Outcome) tune.Result {
	t.Helper()
	_, res := r.Do(t, q)
	if res.Outcome != want {
		t.Fatalf("%s at %v: %+v, want %s", q.Kind, q.Freq, res, want)
	}
	return res
}

// compare checks that the registry holds exactly want for the metrics named.
func (r *rig) compare(t *testing.T, when, want string, names ...string) {
	t.Helper()
	if err := testutil.GatherAndCompare(r.m.Registry(), strings.NewReader(want), names...); err != nil {
		t.Fatalf("%s:\n%v", when, err)
	}
}

// help holds each metric's type and HELP text, as the exposition must show them.
var help = map[string][2]string{
	"tankd_swr":                          {"gauge", "Standing-wave ratio at the motor's position: the latest reading during an operation, the verified one at rest."},
	"tankd_forward_power_watts":          {"gauge", "Forward power of the running operation's latest coupler reading."},
	"tankd_reflected_power_watts":        {"gauge", "Reflected power of the running operation's latest coupler reading."},
	"tankd_motor_position_steps":         {"gauge", "The motor's commanded position, in microsteps."},
	"tankd_position_trusted":             {"gauge", "1 if the motor's position is trusted (homed or referenced), else 0."},
	"tankd_frequency_hertz":              {"gauge", "Frequency of the running operation, or of the last one."},
	"tankd_busy":                         {"gauge", "1 while an operation runs, else 0."},
	"tankd_tuner_state":                  {"gauge", "1 for the tuner's current state, 0 for the others."},
	"tankd_memory_map_points":            {"gauge", "Points in the frequency-to-position memory map."},
	"tankd_fault_latched":                {"gauge", "1 while a fault is latched (nothing moves or transmits until a reset), else 0."},
	"tankd_radio_frequency_hertz":        {"gauge", "Frequency the radio last reported."},
	"tankd_radio_stale":                  {"gauge", "1 if the radio's frequency source has been silent for longer than the follower allows, else 0."},
	"tankd_operations_total":             {"counter", "Operations that ran to an end, by request kind and outcome."},
	"tankd_operation_duration_seconds":   {"histogram", "How long each operation took, by request kind."},
	"tankd_operation_rf_on_seconds":      {"histogram", "Carrier time of each operation that keyed or used a carrier, by request kind."},
	"tankd_motor_steps_total":            {"counter", "Microsteps the tuner commanded: each move's distance from its start to its target."},
	"tankd_faults_total":                 {"counter", "Faults latched: times the tuner entered its faulted state."},
	"tankd_radio_link_errors_total":      {"counter", "Failed exchanges with the radio over its CAT link."},
	"tankd_metrics_events_dropped_total": {"counter", "Service events the metrics subscription dropped because it was full; the event counters miss them."},
	"tankd_loaded_q":                     {"gauge", "Loaded Q of the latest resonance fit on each amateur band (\"none\": outside them)."},
	"tankd_build_info":                   {"gauge", "Always 1: the daemon's version and the Go release it was built with."},
}

// family is one metric family in the text format: its HELP and TYPE lines, then the samples,
// each "{labels} value" or " value" after the name.
func family(name string, samples ...string) string {
	h, ok := help[name]
	if !ok {
		h = [2]string{"untyped", "(the test knows no help for " + name + ")"} // fails the comparison
	}
	var b strings.Builder
	fmt.Fprintf(&b, "# HELP %s %s\n# TYPE %s %s\n", name, h[1], name, h[0])
	for _, s := range samples {
		b.WriteString(name + s + "\n")
	}
	return b.String()
}

// v formats a sample's value exactly.
func v(x float64) string { return " " + strconv.FormatFloat(x, 'g', -1, 64) }

// oneHot is tankd_tuner_state with only s set.
func oneHot(s tune.State) string {
	var samples []string
	for _, st := range []tune.State{tune.Approaching, tune.AwaitingCarrier, tune.Calibrating, tune.Faulted,
		tune.Homing, tune.Idle, tune.Positioning, tune.Referencing, tune.Refining, tune.Scanning, tune.Verifying} {
		x := 0.0
		if st == s {
			x = 1
		}
		samples = append(samples, fmt.Sprintf("{state=%q}%s", st, v(x)))
	}
	return family("tankd_tuner_state", samples...)
}

// histogram is a histogram family with one series per kind: the observations in the order
// they were made (so that the sum adds up the same), against metrics.DurationBuckets.
func histogram(name string, kinds []string, obs map[string][]float64) string {
	var samples []string
	for _, k := range kinds {
		sum := 0.0
		for _, x := range obs[k] {
			sum += x
		}
		for _, le := range append(metrics.DurationBuckets(), math.Inf(1)) {
			n := 0
			for _, x := range obs[k] {
				if x <= le {
					n++
				}
			}
			samples = append(samples, fmt.Sprintf("_bucket{kind=%q,le=%q} %d", k, strconv.FormatFloat(le, 'g', -1, 64), n))
		}
		samples = append(samples, fmt.Sprintf("_sum{kind=%q}%s", k, v(sum)), fmt.Sprintf("_count{kind=%q} %d", k, len(obs[k])))
	}
	return family(name, samples...)
}

// snapshotNames are the gauges read from the snapshot.
var snapshotNames = []string{"tankd_swr", "tankd_forward_power_watts", "tankd_reflected_power_watts",
	"tankd_motor_position_steps", "tankd_position_trusted", "tankd_frequency_hertz", "tankd_busy",
	"tankd_tuner_state", "tankd_memory_map_points", "tankd_fault_latched", "tankd_radio_frequency_hertz",
	"tankd_radio_stale"}

// A tune, a calibration and a failure (a driver bug that panics at the failing tune's first
// coupler reading, which latches a fault) on a real service: after each, the snapshot gauges
// show where the loop is; at the end the counters and histograms hold every operation.
// Figures the tuner's own arithmetic decides (positions, SWRs, durations, Q) are taken from
// what the service and the axis report; everything else is literal.
func TestScriptedOperations(t *testing.T) {
	r := newRig(t, metrics.Options{})
	// Another listener, to add up the moves as the metric's definition does.
	moves := r.Service.Subscribe(1 << 16)
	defer moves.Close()
	armed := false
	r.Loop.Sensor.OnRead(func() {
		if armed {
			armed = false
			panic("injected: a driver bug")
		}
	})

	// Before anything: no SWR, no frequency, no reading; the position the installer gave.
	r.compare(t, "at the start", family("tankd_motor_position_steps", v(20000))+
		family("tankd_position_trusted", v(1))+family("tankd_busy", v(0))+oneHot(tune.Idle)+
		family("tankd_memory_map_points", v(0))+family("tankd_fault_latched", v(0))+
		family("tankd_radio_stale", v(0)), snapshotNames...)

	r.Start(t)
	stopMetrics := r.startMetrics(t)

	r.Loop.Radio.SetFrequency(f80)
	tuned := r.run(t, controller.Request{Kind: controller.Tune, Freq: f80}, tune.Tuned)
	if tuned.Pos != r.Axis.Position() {
		t.Fatalf("the tune ended at %d, the axis stands at %d", tuned.Pos, r.Axis.Position())
	}
	r.compare(t, "after the tune", family("tankd_swr", v(tuned.SWR))+
		family("tankd_motor_position_steps", v(float64(r.Axis.Position())))+family("tankd_position_trusted", v(1))+
		family("tankd_frequency_hertz", v(3.75e6))+family("tankd_busy", v(0))+oneHot(tune.Idle)+
		family("tankd_memory_map_points", v(1))+family("tankd_fault_latched", v(0))+
		family("tankd_radio_stale", v(0)), snapshotNames...)

	r.Loop.Radio.SetFrequency(f40)
	cal := r.run(t, controller.Request{Kind: controller.Calibrate, Freq: f40}, tune.Calibrated)
	r.compare(t, "after the calibration", family("tankd_swr", v(cal.SWR))+
		family("tankd_motor_position_steps", v(float64(r.Axis.Position())))+family("tankd_position_trusted", v(1))+
		family("tankd_frequency_hertz", v(7.1e6))+family("tankd_busy", v(0))+oneHot(tune.Idle)+
		family("tankd_memory_map_points", v(2))+family("tankd_fault_latched", v(0))+
		family("tankd_radio_stale", v(0)), snapshotNames...)

	// The failure: the motor moves to the new frequency's prediction, and the first reading
	// panics. No SWR is shown any more: the last verified one was taken elsewhere.
	armed = true
	r.Loop.Radio.SetFrequency(f80b)
	failed := r.run(t, controller.Request{Kind: controller.Tune, Freq: f80b}, tune.Fault)
	r.compare(t, "after the fault",
		family("tankd_motor_position_steps", v(float64(r.Axis.Position())))+
			family("tankd_position_trusted", v(flag(r.Axis.Trusted())))+
			family("tankd_frequency_hertz", v(3.7e6))+family("tankd_busy", v(0))+oneHot(tune.Faulted)+
			family("tankd_memory_map_points", v(float64(r.Map.Len())))+family("tankd_fault_latched", v(1))+
			family("tankd_radio_stale", v(0)), snapshotNames...)
	if r.Map.Len() != 2 {
		t.Fatalf("the failed tune left %d points in the map, want the 2 learned before", r.Map.Len())
	}

	stopMetrics() // counts every event published so far
	steps := 0.0
	for _, e := range fakeservice.Drain(moves) {
		if e.Kind == controller.EventTune && e.Tune.Kind == tune.KindMove {
			steps += math.Abs(float64(e.Tune.Target) - e.Tune.Pos)
		}
	}
	if moves.Dropped() != 0 || steps == 0 {
		t.Fatalf("the test's own listener dropped %d events and saw %g steps of moves", moves.Dropped(), steps)
	}
	if tuned.Fit == nil || cal.Fit == nil || failed.Fit != nil {
		t.Fatalf("fits: tune %v, calibration %v, failure %v; want the first two only", tuned.Fit, cal.Fit, failed.Fit)
	}
	sec := func(d time.Duration) float64 { return d.Seconds() }
	kinds := []string{"calibrate", "tune"}
	r.compare(t, "the counters at the end",
		family("tankd_operations_total",
			`{kind="calibrate",outcome="calibrated"} 1`,
			`{kind="tune",outcome="fault"} 1`,
			`{kind="tune",outcome="tuned"} 1`)+
			histogram("tankd_operation_duration_seconds", kinds, map[string][]float64{
				"calibrate": {sec(cal.Duration())}, "tune": {sec(tuned.Duration()), sec(failed.Duration())}})+
			histogram("tankd_operation_rf_on_seconds", kinds, map[string][]float64{
				"calibrate": {sec(cal.RFTime)}, "tune": nonzero(sec(tuned.RFTime), sec(failed.RFTime))})+
			family("tankd_motor_steps_total", v(steps))+
			family("tankd_faults_total", v(1))+
			family("tankd_loaded_q", `{band="40m"}`+v(cal.Fit.QLoaded), `{band="80m"}`+v(tuned.Fit.QLoaded))+
			family("tankd_metrics_events_dropped_total", v(0))+
			family("tankd_radio_link_errors_total", v(0)),
		"tankd_operations_total", "tankd_operation_duration_seconds", "tankd_operation_rf_on_seconds",
		"tankd_motor_steps_total", "tankd_faults_total", "tankd_loaded_q", "tankd_metrics_events_dropped_total",
		"tankd_radio_link_errors_total")
}

func flag(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// nonzero keeps the carrier times of operations that had one (the histogram's rule).
func nonzero(xs ...float64) []float64 {
	var out []float64
	for _, x := range xs {
		if x > 0 {
			out = append(out, x)
		}
	}
	return out
}

// Every metric, the Go runtime's and the process's included, passes the Prometheus linter
// once each labelled family has a series.
func TestMetricsPassLint(t *testing.T) {
	r := newRig(t, metrics.Options{Version: "v0.0.0-test"})
	r.Start(t)
	stop := r.startMetrics(t)
	r.Loop.Radio.SetFrequency(f80)
	r.run(t, controller.Request{Kind: controller.Tune, Freq: f80}, tune.Tuned)
	r.m.LinkError()
	stop()
	if n, err := testutil.GatherAndCount(r.m.Registry(), "tankd_loaded_q", "tankd_operations_total",
		"tankd_operation_duration_seconds", "tankd_operation_rf_on_seconds", "tankd_swr"); err != nil || n != 5 {
		t.Fatalf("%d series of the labelled and optional families (%v), want 5: the lint would miss some", n, err)
	}
	problems, err := testutil.GatherAndLint(r.m.Registry())
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("lint: %s: %s", p.Metric, p.Text)
	}
}

// A scrape in the middle of a tune returns at once, with the tuner held still on its own
// goroutine inside a coupler reading: the collector reads the published snapshot, never the
// tuner. It shows the operation as it stands.
func TestScrapeDuringAnOperation(t *testing.T) {
	r := newRig(t, metrics.Options{})
	paused, resume := make(chan struct{}), make(chan struct{})
	once := false
	r.Loop.Sensor.OnRead(func() {
		if once || r.Service.Snapshot().State != tune.Refining {
			return
		}
		once = true
		close(paused)
		select { // hold the tuner here until the test has scraped
		case <-resume:
		case <-time.After(fakeservice.Safety):
		}
	})
	r.Start(t)
	r.startMetrics(t)
	r.Loop.Radio.SetFrequency(f80)
	id := r.Submit(t, controller.Request{Kind: controller.Tune, Freq: f80})
	select {
	case <-paused:
	case <-time.After(fakeservice.Safety):
		t.Fatal("the tune never reached its fine sweep")
	}

	type scrape struct {
		code  int
		body  string
		count int
		err   error
	}
	done := make(chan scrape, 1)
	go func() {
		var s scrape
		rec := httptest.NewRecorder()
		r.m.Handler().ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/metrics", nil))
		s.code, s.body = rec.Code, rec.Body.String()
		s.err = testutil.GatherAndCompare(r.m.Registry(), strings.NewReader(
			family("tankd_forward_power_watts", v(5))+ // the tuner's default tune power (tune.Options)
				family("tankd_frequency_hertz", v(3.75e6))+family("tankd_busy", v(1))+oneHot(tune.Refining)),
			"tankd_forward_power_watts", "tankd_frequency_hertz", "tankd_busy", "tankd_tuner_state")
		if s.err == nil {
			s.count, s.err = testutil.GatherAndCount(r.m.Registry(), "tankd_swr", "tankd_reflected_power_watts")
		}
		done <- s
	}()
	var s scrape
	select {
	case s = <-done:
	case <-time.After(fakeservice.Safety):
		close(resume)
		t.Fatal("a scrape blocked while the tuner was busy")
	}
	close(resume)
	if s.code != http.StatusOK || !strings.Contains(s.body, "\ntankd_busy 1\n") {
		t.Fatalf("scrape during the tune: HTTP %d, body without tankd_busy 1:\n%s", s.code, s.body)
	}
	if s.err != nil {
		t.Fatalf("during the tune:\n%v", s.err)
	}
	if s.count != 2 {
		t.Fatalf("%d of the SWR and reflected power series during the sweep, want both", s.count)
	}
	if st := r.Wait(t, id); st.Result == nil || st.Result.Outcome != tune.Tuned {
		t.Fatalf("the tune after the scrape: %+v", st.Result)
	}
	// At rest the coupler is not read: the powers go, the verified SWR stays.
	if n, err := testutil.GatherAndCount(r.m.Registry(), "tankd_swr", "tankd_forward_power_watts", "tankd_reflected_power_watts"); err != nil || n != 1 {
		t.Fatalf("%d of SWR and powers at rest (%v), want the SWR only", n, err)
	}
}

// The handler serves the text exposition format to a plain GET, with the build and the link
// errors counted through LinkError.
func TestHandlerServesText(t *testing.T) {
	r := newRig(t, metrics.Options{Version: "1.2.3"})
	srv := httptest.NewServer(r.m.Handler())
	defer srv.Close()
	r.m.LinkError()
	r.m.LinkError()

	resp, err := http.Get(srv.URL)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if ct := resp.Header.Get("Content-Type"); resp.StatusCode != http.StatusOK || !strings.HasPrefix(ct, "text/plain; version=0.0.4") {
		t.Fatalf("HTTP %d, Content-Type %q: want 200 and the text format", resp.StatusCode, ct)
	}
	want := family("tankd_build_info", fmt.Sprintf("{goversion=%q,version=\"1.2.3\"} 1", runtime.Version())) +
		family("tankd_radio_link_errors_total", v(2)) +
		family("tankd_motor_position_steps", v(20000))
	if err := testutil.ScrapeAndCompare(srv.URL, strings.NewReader(want),
		"tankd_build_info", "tankd_radio_link_errors_total", "tankd_motor_position_steps"); err != nil {
		t.Fatal(err)
	}
	// The Go runtime's and the process's collectors are on the same registry.
	if n, err := testutil.GatherAndCount(r.m.Registry(), "go_goroutines", "process_start_time_seconds"); err != nil || n != 2 {
		t.Fatalf("go_goroutines and process_start_time_seconds: %d series (%v), want 2", n, err)
	}
}

// Events the metrics could not keep up with are dropped by the subscription, never held up
// the tuner, and are counted: here Run starts only after a whole tune, with room for four.
func TestDroppedEventsAreCounted(t *testing.T) {
	const depth = 4
	r := newRig(t, metrics.Options{Depth: depth})
	all := r.Service.Subscribe(1 << 16)
	defer all.Close()
	stopService := r.Start(t)
	r.Loop.Radio.SetFrequency(f80)
	r.run(t, controller.Request{Kind: controller.Tune, Freq: f80}, tune.Tuned)
	stopService() // nothing more is published
	n := len(fakeservice.Drain(all))
	if all.Dropped() != 0 || n < 100 {
		t.Fatalf("the full listener saw %d events and dropped %d; a tune makes hundreds", n, all.Dropped())
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel() // Run counts what is queued and returns
	if err := r.m.Run(ctx); err != nil {
		t.Fatal(err)
	}
	r.compare(t, "after a late start", family("tankd_metrics_events_dropped_total", v(float64(n-depth))),
		"tankd_metrics_events_dropped_total")
}

// The radio's staleness and frequency come from the follower's reports, in the snapshot.
func TestRadioGauges(t *testing.T) {
	r := newRig(t, metrics.Options{})
	fl, err := controller.NewFollower(r.Service, controller.FollowOptions{Manual: true, StaleAfter: 10 * time.Second})
	if err != nil {
		t.Fatal(err)
	}
	r.Start(t)
	fl.Update(f80, controller.SourceRadio) // a band change: a pre-position at once
	r.Wait(t, fl.Status().Submitted)
	names := []string{"tankd_radio_frequency_hertz", "tankd_radio_stale"}
	r.compare(t, "just heard", family("tankd_radio_frequency_hertz", v(3.75e6))+family("tankd_radio_stale", v(0)), names...)
	r.Loop.Clock.Advance(10 * time.Second)
	fl.Poll()
	r.compare(t, "after 10 s of silence", family("tankd_radio_frequency_hertz", v(3.75e6))+family("tankd_radio_stale", v(1)), names...)
}

func TestNewRefusesBadOptions(t *testing.T) {
	r := newRig(t, metrics.Options{})
	for _, c := range []struct {
		svc *controller.Service
		o   metrics.Options
	}{
		{nil, metrics.Options{}},
		{r.Service, metrics.Options{Depth: -1}},
		{r.Service, metrics.Options{Depth: 2_000_000}},
	} {
		m, err := metrics.New(c.svc, c.o)
		if err == nil {
			m.Close()
			t.Errorf("accepted service %p with %+v", c.svc, c.o)
		} else if !strings.HasPrefix(err.Error(), "metrics") {
			t.Errorf("error %q does not say what failed", err)
		}
	}
}

// Close ends Run (or stands for it), and Run runs once.
func TestCloseEndsRunAndRunRunsOnce(t *testing.T) {
	r := newRig(t, metrics.Options{})
	errc := make(chan error, 1)
	go func() { errc <- r.m.Run(context.Background()) }()
	r.m.Close()
	select {
	case err := <-errc:
		if err != nil {
			t.Fatalf("Run after Close: %v", err)
		}
	case <-time.After(fakeservice.Safety):
		t.Fatal("Run did not return after Close")
	}
	if err := r.m.Run(context.Background()); err == nil {
		t.Fatal("a second Run was accepted")
	}
}

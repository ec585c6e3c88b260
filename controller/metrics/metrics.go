package metrics

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"net/http"
	"runtime"
	"slices"
	"sync/atomic"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/band"
	"github.com/tankd/tankd/controller/tune"
)

// namespace prefixes every metric of tankd's own.
const namespace = "tankd"

// durationBuckets are the upper bounds, in seconds, of the buckets of the operation duration
// and carrier-time histograms. A pre-position nudge, a reference or a reset takes well under a
// second; a warm tune a second or two; a pre-position across the travel a few seconds; 8 s is
// the tuner's default cap on one operation's carrier time and 60 s its cap when a lost position
// has to be found from the dip (controller/tune Options), so both caps sit on an edge.
var durationBuckets = [...]float64{0.1, 0.25, 0.5, 1, 2, 4, 8, 15, 30, 60}

// DurationBuckets returns the upper bounds, in seconds, of the buckets of both histograms: a
// fresh slice each call.
func DurationBuckets() []float64 { return slices.Clone(durationBuckets[:]) }

// noBand is the band label of a fit at a frequency outside every amateur band.
const noBand = "none"

// Options configure the metrics. Zero values take the defaults given.
type Options struct {
	// Version is the daemon's version, shown in tankd_build_info; default "unknown".
	Version string
	// Depth is how many events the subscription holds while Run catches up; default 1024 (a
	// few seconds of a scan's readings: Run only does arithmetic on each, so it keeps up
	// unless the machine is starved, and then losing some is better than holding memory).
	Depth int
	// Logger receives the errors of serving a scrape; default none.
	Logger *slog.Logger
}

func (o *Options) defaults() {
	if o.Version == "" {
		o.Version = "unknown"
	}
	if o.Depth == 0 {
		o.Depth = 1024
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
}

func (o Options) validate() error {
	if o.Depth < 1 || o.Depth > 1_000_000 {
		return fmt.Errorf("depth %d: want 1 to 1000000 events", o.Depth)
	}
	return nil
}

// Metrics is a Service's metrics on a registry of their own. Build it with New.
type Metrics struct {
	reg     *prometheus.Registry
	sub     *controller.Subscription
	handler http.Handler
	started atomic.Bool

	operations *prometheus.CounterVec
	duration   *prometheus.HistogramVec
	rfOn       *prometheus.HistogramVec
	steps      prometheus.Counter
	faults     prometheus.Counter
	linkErrors prometheus.Counter
	dropped    prometheus.Counter
	loadedQ    *prometheus.GaugeVec

	// seenDropped is how many of the subscription's drops are already in dropped; Run's own.
	seenDropped uint64
}

// New builds the metrics of svc, registers them with the Go and process collectors on a
// registry of their own, and subscribes to svc's events. The caller must then start Run, or
// Close the metrics if it never will.
func New(svc *controller.Service, o Options) (*Metrics, error) {
	if svc == nil {
		return nil, errors.New("metrics: no service")
	}
	o.defaults()
	if err := o.validate(); err != nil {
		return nil, fmt.Errorf("metrics options: %w", err)
	}
	m := &Metrics{
		reg: prometheus.NewRegistry(),
		operations: prometheus.NewCounterVec(prometheus.CounterOpts{
			Namespace: namespace, Name: "operations_total",
			Help: "Operations that ran to an end, by request kind and outcome.",
		}, []string{"kind", "outcome"}),
		duration: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Namespace: namespace, Name: "operation_duration_seconds",
			Help:    "How long each operation took, by request kind.",
			Buckets: DurationBuckets(),
		}, []string{"kind"}),
		rfOn: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Namespace: namespace, Name: "operation_rf_on_seconds",
			Help:    "Carrier time of each operation that keyed or used a carrier, by request kind.",
			Buckets: DurationBuckets(),
		}, []string{"kind"}),
		steps: prometheus.NewCounter(prometheus.CounterOpts{
			Namespace: namespace, Name: "motor_steps_total",
			Help: "Microsteps the tuner commanded: each move's distance from its start to its target.",
		}),
		faults: prometheus.NewCounter(prometheus.CounterOpts{
			Namespace: namespace, Name: "faults_total",
			Help: "Faults latched: times the tuner entered its faulted state.",
		}),
		linkErrors: prometheus.NewCounter(prometheus.CounterOpts{
			Namespace: namespace, Name: "radio_link_errors_total",
			Help: "Failed exchanges with the radio over its CAT link.",
		}),
		dropped: prometheus.NewCounter(prometheus.CounterOpts{
			Namespace: namespace, Name: "metrics_events_dropped_total",
			Help: "Service events the metrics subscription dropped because it was full; the event counters miss them.",
		}),
		loadedQ: prometheus.NewGaugeVec(prometheus.GaugeOpts{
			Namespace: namespace, Name: "loaded_q",
			Help: "Loaded Q of the latest resonance fit on each amateur band (\"none\": outside them).",
		}, []string{"band"}),
	}
	build := prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Namespace: namespace, Name: "build_info",
		Help: "Always 1: the daemon's version and the Go release it was built with.",
	}, []string{"version", "goversion"})
	build.WithLabelValues(o.Version, runtime.Version()).Set(1)

	for _, c := range []prometheus.Collector{
		newSnapshotCollector(svc),
		m.operations, m.duration, m.rfOn, m.steps, m.faults, m.linkErrors, m.dropped, m.loadedQ, build,
		collectors.NewGoCollector(),
		collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}),
	} {
		if err := m.reg.Register(c); err != nil {
			return nil, fmt.Errorf("metrics: register: %w", err)
		}
	}
	m.handler = promhttp.HandlerFor(m.reg, promhttp.HandlerOpts{
		ErrorLog:      errorLog{o.Logger.With("component", "metrics")},
		ErrorHandling: promhttp.ContinueOnError,
	})
	m.sub = svc.Subscribe(o.Depth)
	return m, nil
}

// Registry is the metrics' own registry: to gather from in tests, or to register a
// collector of the daemon's own alongside.
func (m *Metrics) Registry() *prometheus.Registry { return m.reg }

// Handler serves the registry in the Prometheus exposition formats. A scrape reads the
// service's snapshot and the counters; it never waits for the tuner.
func (m *Metrics) Handler() http.Handler { return m.handler }

// LinkError counts one failed exchange with the radio (a timeout, a garbled or refused reply).
// It may be called from any goroutine.
func (m *Metrics) LinkError() { m.linkErrors.Inc() }

// Run turns the service's events into counters until ctx ends, then counts the events already
// queued and closes the subscription. It returns early, with nil, if Close is called. It may be
// called once.
func (m *Metrics) Run(ctx context.Context) error {
	if !m.started.CompareAndSwap(false, true) {
		return errors.New("metrics: run: already started")
	}
	defer m.sub.Close()
	events := m.sub.Events()
	for {
		select {
		case <-ctx.Done():
			// What the service published before ctx ended is in the queue: count it, so that
			// a caller who stops Run after the service sees every event it could.
			for {
				select {
				case e, ok := <-events:
					if !ok {
						m.countDrops()
						return nil
					}
					m.observe(e)
				default:
					m.countDrops()
					return nil
				}
			}
		case e, ok := <-events:
			if !ok {
				m.countDrops()
				return nil
			}
			m.observe(e)
			m.countDrops()
		}
	}
}

// Close ends the subscription: for metrics whose Run never starts, or to end Run without its
// context. It may be called more than once, from any goroutine.
func (m *Metrics) Close() { m.sub.Close() }

// countDrops brings the drop counter up to the subscription's; Run's goroutine only.
func (m *Metrics) countDrops() {
	if n := m.sub.Dropped(); n > m.seenDropped {
		m.dropped.Add(float64(n - m.seenDropped))
		m.seenDropped = n
	}
}

// observe books one event.
func (m *Metrics) observe(e controller.Event) {
	switch e.Kind {
	case controller.EventRequest:
		if e.Status != nil {
			m.finished(*e.Status)
		}
	case controller.EventTune:
		if e.Tune != nil {
			m.tuned(*e.Tune)
		}
	}
}

// finished books an operation that ran to its end.
func (m *Metrics) finished(st controller.RequestStatus) {
	if st.Result == nil {
		return // queued or running; or final without having run (replaced, cleared, a stop)
	}
	kind, r := string(st.Request.Kind), st.Result
	m.operations.WithLabelValues(kind, string(r.Outcome)).Inc()
	m.duration.WithLabelValues(kind).Observe(r.Duration().Seconds())
	if r.RFTime > 0 {
		m.rfOn.WithLabelValues(kind).Observe(r.RFTime.Seconds())
	}
}

// tuned books a step of the tuner's work.
func (m *Metrics) tuned(e tune.Event) {
	switch e.Kind {
	case tune.KindMove:
		m.steps.Add(math.Abs(float64(e.Target) - e.Pos))
	case tune.KindState:
		if e.State == tune.Faulted && e.From != tune.Faulted {
			m.faults.Inc()
		}
	case tune.KindFit:
		if e.Fit == nil || !(e.Fit.QLoaded > 0) || math.IsInf(e.Fit.QLoaded, 0) {
			return // a fit without a slope to turn its width into a Q
		}
		name := noBand
		if b, ok := band.Of(e.Freq); ok {
			name = b.Name
		}
		m.loadedQ.WithLabelValues(name).Set(e.Fit.QLoaded)
	}
}

// errorLog hands promhttp's errors to a slog.Logger (promhttp.Logger).
type errorLog struct{ log *slog.Logger }

// Println implements promhttp.Logger.
func (l errorLog) Println(v ...any) { l.log.Error("serving metrics", "err", fmt.Sprint(v...)) }

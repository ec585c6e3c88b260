package controller

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"runtime/debug"
	"sync"
	"sync/atomic"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
)

// Kind is what a request asks for.
type Kind string

// Request kinds.
const (
	// Follow: the radio moved to Freq. The loop pre-positions from the memory map at once
	// (no RF), and tunes with a carrier too if the service is configured to (AutoTune).
	Follow Kind = "follow"
	// Tune: tune at Freq with a carrier now.
	Tune Kind = "tune"
	// Home: run the homing sequence.
	Home Kind = "home"
	// Calibrate: measure the gear backlash at Freq (needs a carrier).
	Calibrate Kind = "calibrate"
	// Reset: clear a latched fault (the position stays untrusted until homed or re-referenced).
	Reset Kind = "reset"
	// Stop: abandon whatever is running and stay where the motor stops.
	Stop Kind = "stop"
)

// Request is one piece of work for the service.
type Request struct {
	Kind Kind
	Freq physic.Frequency
}

func (r Request) validate() error {
	switch r.Kind {
	case Follow, Tune, Calibrate:
		if r.Freq <= 0 {
			return fmt.Errorf("%s request: frequency %v: want more than 0", r.Kind, r.Freq)
		}
	case Home, Reset, Stop:
	default:
		return fmt.Errorf("request kind %q: want follow, tune, home, calibrate, reset or stop", r.Kind)
	}
	return nil
}

// Options configure a Service.
type Options struct {
	// AutoTune makes every Follow request an RF tune as well (the tuner must be allowed to
	// transmit, or an operator must key a carrier within its wait).
	AutoTune bool
	// MapPath, if set, is where the memory map is saved after every operation that taught it
	// something, and on the way out.
	MapPath string
	// CalibrationPath, if set, is where a measured backlash is saved.
	CalibrationPath string
	// Observer also receives every tuner event (after the service has noted it).
	Observer tune.Observer
	// OnResult, if set, is called with every operation's result, on the service's goroutine.
	OnResult func(tune.Result)
	// Notices are things the operator must hear of that happened before the service started
	// (a damaged map set aside, say); every snapshot carries them.
	Notices []string
	Logger  *slog.Logger
}

// Snapshot is the service's state as readers see it.
type Snapshot struct {
	At        time.Time
	State     tune.State
	Freq      physic.Frequency // of the running or last operation
	Busy      bool
	Axis      motion.AxisState
	Last      *tune.Result // the last finished operation
	Pending   *Request     // waiting to run
	MapPoints int
	Drift     memmap.Drift
	Fault     string   // the latched fault, the tuner's or the axis's; empty if none
	Notices   []string // see Options.Notices
}

// Service runs the tuner. Create it with NewService, start Run on one goroutine, and Submit
// requests from any goroutine.
type Service struct {
	tuner *tune.Tuner
	d     tune.Deps
	to    tune.Options
	o     Options
	log   *slog.Logger

	mu      sync.Mutex
	pending *Request
	cancel  context.CancelFunc // of the running operation
	current *Request
	wake    chan struct{}

	snap  atomic.Pointer[Snapshot]
	state atomic.Value // tune.State
	fault atomic.Pointer[string]
}

// NewService builds the tuner on d and o and the service around it.
func NewService(d tune.Deps, to tune.Options, o Options) (*Service, error) {
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	s := &Service{d: d, to: to, o: o, log: o.Logger.With("component", "service"), wake: make(chan struct{}, 1)}
	next := d.Observer
	d.Observer = tune.ObserverFunc(func(e tune.Event) {
		if e.Kind == tune.KindState {
			s.state.Store(e.State)
			s.publish(nil)
		}
		if o.Observer != nil {
			o.Observer.Observe(e)
		}
		if next != nil {
			next.Observe(e)
		}
	})
	if to.Logger == nil {
		to.Logger = o.Logger
	}
	t, err := tune.New(d, to)
	if err != nil {
		return nil, err
	}
	s.tuner = t
	s.state.Store(tune.Idle)
	s.publish(nil)
	return s, nil
}

// Tuner gives the service's tuner, for setup before Run (installing a stored calibration).
func (s *Service) Tuner() *tune.Tuner { return s.tuner }

// Submit queues r. The newest request replaces one still waiting and cancels one that is
// running (a new frequency must not wait for a tune on the old one); Stop only cancels.
func (s *Service) Submit(r Request) error {
	if err := r.validate(); err != nil {
		return err
	}
	s.mu.Lock()
	if s.cancel != nil {
		s.cancel()
	}
	if r.Kind == Stop {
		s.pending = nil
	} else {
		s.pending = &r
	}
	s.mu.Unlock()
	s.publish(nil)
	select {
	case s.wake <- struct{}{}:
	default:
	}
	return nil
}

// Snapshot returns the latest published state. It never blocks on the hardware.
func (s *Service) Snapshot() Snapshot { return *s.snap.Load() }

func (s *Service) publish(last *tune.Result) {
	s.mu.Lock()
	sn := Snapshot{At: s.d.Clock.Now(), Busy: s.current != nil, Axis: s.d.Axis.Snapshot(),
		MapPoints: s.d.Map.Len(), Drift: s.d.Map.Drift()}
	if st, ok := s.state.Load().(tune.State); ok {
		sn.State = st
	}
	sn.Notices = s.o.Notices
	if f := s.fault.Load(); f != nil {
		sn.Fault = *f
	} else if sn.Axis.Fault != "" {
		sn.Fault = sn.Axis.Fault
	}
	if s.current != nil {
		sn.Freq = s.current.Freq
	}
	if s.pending != nil {
		p := *s.pending
		sn.Pending = &p
	}
	if old := s.snap.Load(); old != nil {
		sn.Last = old.Last
		if s.current == nil {
			sn.Freq = old.Freq
		}
	}
	if last != nil {
		sn.Last = last
		sn.Freq = last.Freq
	}
	s.snap.Store(&sn)
	s.mu.Unlock()
}

// Run serves requests until ctx ends, then stops the motor, drops any carrier, saves the map
// and halts the axis. It returns nil on a normal shutdown.
func (s *Service) Run(ctx context.Context) error {
	defer s.shutdown()
	for {
		s.mu.Lock()
		r := s.pending
		s.pending = nil
		var opCtx context.Context
		if r != nil {
			var cancel context.CancelFunc
			opCtx, cancel = context.WithCancel(ctx)
			s.cancel, s.current = cancel, r
		}
		s.mu.Unlock()
		if r == nil {
			select {
			case <-ctx.Done():
				return nil
			case <-s.wake:
				continue
			}
		}
		res := s.serve(opCtx, r)
		s.mu.Lock()
		s.cancel()
		s.cancel, s.current = nil, nil
		s.mu.Unlock()
		s.guarded(func() { s.after(r, res) })
		if ctx.Err() != nil {
			return nil
		}
	}
}

// serve runs one request, turning a panic anywhere in it into a latched fault.
func (s *Service) serve(ctx context.Context, r *Request) (res tune.Result) {
	now := s.d.Clock.Now()
	res = tune.Result{Outcome: tune.Fault, Freq: r.Freq, Started: now, Finished: now}
	s.guarded(func() { res = s.do(ctx, *r) })
	if res.Outcome == tune.Fault && res.Err == nil {
		res.Err = s.tuner.Fault()
	}
	return res
}

// guarded runs f and recovers a panic in it: the carrier is dropped, the motor stopped and
// released, and a fault latched (logged with the stack), and the service carries on, refusing
// to move or transmit until a reset.
func (s *Service) guarded(f func()) {
	defer func() {
		r := recover()
		if r == nil {
			return
		}
		err := fmt.Errorf("%w: panic in the service: %v", tune.ErrInternal, r)
		s.log.Error("panic: carrier dropped, motor stopped, fault latched; the service goes on", "err", err, "stack", string(debug.Stack()))
		s.quiesce()
		s.tuner.Latch(err)
		msg := s.tuner.Fault().Error()
		s.fault.Store(&msg)
	}()
	f()
}

// quiesce makes the hardware safe after something went wrong outside the tuner's own paths:
// the tune carrier dropped (only if the tuner may key it: an operator's carrier is the
// operator's), the motor stopped and released.
func (s *Service) quiesce() {
	defer func() {
		if r := recover(); r != nil {
			s.log.Error("panic while making the hardware safe", "panic", r)
		}
	}()
	if s.to.Transmit && s.d.Transmitter != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
		if err := s.d.Transmitter.Unkey(ctx); err != nil {
			s.log.Error("could not drop the tune carrier", "err", err)
		}
		cancel()
	}
	if err := s.d.Axis.Halt(); err != nil {
		s.log.Error("halt", "err", err)
	}
}

func (s *Service) do(ctx context.Context, r Request) tune.Result {
	t := s.tuner
	switch r.Kind {
	case Follow:
		return t.Tune(ctx, tune.Request{Freq: r.Freq, RF: s.o.AutoTune})
	case Tune:
		return t.Tune(ctx, tune.Request{Freq: r.Freq, RF: true})
	case Home:
		return t.Home(ctx)
	case Calibrate:
		return t.Calibrate(ctx, r.Freq)
	case Reset:
		now := s.d.Clock.Now()
		res := tune.Result{Outcome: tune.Reset, Started: now, Finished: now}
		if err := t.Reset(); err != nil {
			res.Outcome, res.Err = tune.Fault, err
		} else if err := s.d.Axis.Enable(ctx); err != nil {
			// a fault may have released the motor; a reset energises it again
			res.Outcome, res.Err = tune.Fault, err
		}
		res.Finished = s.d.Clock.Now()
		return res
	}
	return tune.Result{Outcome: tune.Fault, Err: fmt.Errorf("request kind %q", r.Kind)}
}

// after persists what the operation taught and publishes its result.
func (s *Service) after(r *Request, res tune.Result) {
	switch res.Outcome {
	case tune.Tuned, tune.Calibrated, tune.Referenced:
		s.saveMap()
	}
	if res.Outcome == tune.Calibrated && s.o.CalibrationPath != "" {
		c := tune.Calibration{Backlash: res.Backlash, At: res.Finished, Freq: res.Freq}
		if err := tune.SaveCalibration(s.o.CalibrationPath, c); err != nil {
			s.log.Error("could not save the calibration", "path", s.o.CalibrationPath, "err", err)
		}
	}
	if err := s.tuner.Fault(); err != nil {
		msg := err.Error()
		s.fault.Store(&msg)
	} else {
		s.fault.Store(nil)
	}
	s.publish(&res)
	s.log.Info("request done", "kind", r.Kind, "outcome", res.Outcome, "freq", res.Freq, "err", res.Err)
	if s.o.OnResult != nil {
		s.o.OnResult(res)
	}
}

func (s *Service) saveMap() {
	if s.o.MapPath == "" {
		return
	}
	if err := s.d.Map.Save(s.o.MapPath); err != nil {
		s.log.Error("could not save the memory map", "path", s.o.MapPath, "err", err)
	}
}

func (s *Service) shutdown() {
	// The running operation has already stopped the motor and dropped the carrier on its way
	// out (its context was cancelled with ours); make the axis inert and keep what was learned.
	s.saveMap()
	if err := s.d.Axis.Halt(); err != nil && !errors.Is(err, motion.ErrFault) {
		s.log.Error("halt", "err", err)
	}
	s.state.Store(tune.Idle)
	s.publish(nil)
}

package controller

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"runtime/debug"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/tune"
)

// Options configure a Service. Zero values take the defaults given.
type Options struct {
	// AutoTune makes every Follow request an RF tune as well (the tuner must be allowed to
	// transmit, or an operator must key a carrier within its wait).
	AutoTune bool
	// State, if set, is where the memory map and the calibration came from and go back to (see
	// LoadState): the service installs the stored calibration, saves what operations teach,
	// writes the position hint after operations, and saves the map on the way out. Deps.Map may
	// then be nil; if it is set it must be State's map. Nil: nothing is saved.
	State *State
	// AfterOperation, if set, is called on the service's goroutine after every operation, with
	// the motor at rest and the request's final status, before subscribers hear of it and
	// before the next request starts: for work that must see the hardware at rest (the
	// simulator saving its state). It must be quick. A panic in it latches a fault, as any
	// panic in the service does.
	AfterOperation func(RequestStatus)
	// Notices are things the operator must hear of that happened before the service started;
	// every snapshot carries them, after State's own.
	Notices []string
	// SnapshotInterval is the least time, on the service's clock, between two republished
	// snapshots during an operation (moves and readings); changes of state and of requests are
	// published at once. Default 50 ms: 20 updates a second is as fast as a person follows a
	// moving figure (common practice for status displays), and keeps the event stream light.
	SnapshotInterval time.Duration
	// Backlog is how many of the latest events EventsSince can return; default 1000 (a few
	// seconds of a scan's readings, enough for a client to reconnect).
	Backlog int
	// History is how many finished requests Request and Wait remember; default 256.
	History int
	Logger  *slog.Logger
}

func (o *Options) defaults() {
	if o.SnapshotInterval == 0 {
		o.SnapshotInterval = 50 * time.Millisecond
	}
	if o.Backlog == 0 {
		o.Backlog = 1000
	}
	if o.History == 0 {
		o.History = 256
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
}

func (o Options) validate() error {
	var errs []error
	if o.SnapshotInterval < 0 || o.SnapshotInterval > time.Minute {
		errs = append(errs, fmt.Errorf("snapshot interval %v: want 0 to 1 min", o.SnapshotInterval))
	}
	if o.Backlog < 1 || o.Backlog > 1_000_000 {
		errs = append(errs, fmt.Errorf("backlog %d: want 1 to 1000000 events", o.Backlog))
	}
	if o.History < 16 || o.History > 1_000_000 {
		errs = append(errs, fmt.Errorf("history %d: want 16 to 1000000 requests", o.History))
	}
	return errors.Join(errs...)
}

// Service runs the tuner. Create it with NewService, start Run on one goroutine, Submit
// requests and read Snapshot, Request and subscriptions from any goroutine.
type Service struct {
	tuner *tune.Tuner
	d     tune.Deps
	to    tune.Options
	o     Options
	log   *slog.Logger
	store *State
	// defaultQ is the tuner's, for readers on other goroutines (the tuner is its goroutine's)
	defaultQ float64

	started atomic.Bool
	done    chan struct{}
	wake    chan struct{}

	mu      sync.Mutex
	nextID  RequestID
	queue   []*entry
	running *entry
	byID    map[RequestID]*entry
	order   []RequestID // history, oldest first
	stopped bool
	tstate  tune.State
	fault   string // the tuner's latched fault, as last seen on the service's goroutine
	last    *tune.Result
	lastID  RequestID
	live    Live
	radio   RadioStatus
	notices []string
	final   *statedir.Marker // the clean stop, once Run has returned with the motor halted
	// followers are the followers whose timers Run drives; sleeping ends Run's idle wait for
	// their next deadline.
	followers []*Follower
	sleeping  context.CancelFunc
	// nextLive is when a throttled snapshot may next be published, in Unix nanoseconds on the
	// service's clock: read without mu on every poll of an operation.
	nextLive atomic.Int64

	snap atomic.Pointer[Snapshot]

	// edits are map edits waiting for Run to apply them between operations (memory.go).
	edits editQueue

	evmu    sync.Mutex
	seq     uint64
	backlog []Event // a ring once full; head is the oldest
	head    int
	subs    map[*Subscription]struct{}
}

// NewService builds the tuner on d and to, and the service around it. The service observes the
// tuner itself: d.Observer must be nil (listeners Subscribe).
func NewService(d tune.Deps, to tune.Options, o Options) (*Service, error) {
	o.defaults()
	if err := o.validate(); err != nil {
		return nil, fmt.Errorf("service options: %w", err)
	}
	if d.Observer != nil {
		return nil, errors.New("service: the tuner's observer is the service's own: leave Deps.Observer nil and Subscribe")
	}
	if o.State != nil {
		switch {
		case d.Map == nil:
			d.Map = o.State.Map()
		case d.Map != o.State.Map():
			return nil, errors.New("service: Deps.Map is not the State's map")
		}
	}
	if to.Logger == nil {
		to.Logger = o.Logger
	}
	s := &Service{
		d: d, to: to, o: o, log: o.Logger.With("component", "service"), store: o.State,
		done: make(chan struct{}), wake: make(chan struct{}, 1),
		byID: make(map[RequestID]*entry), tstate: tune.Idle,
		backlog: make([]Event, 0, o.Backlog), subs: make(map[*Subscription]struct{}),
	}
	s.d.Observer = tune.ObserverFunc(s.observe)
	t, err := tune.New(s.d, to)
	if err != nil {
		return nil, fmt.Errorf("service: %w", err)
	}
	s.tuner, s.defaultQ = t, t.Options().DefaultQ
	if o.State != nil {
		if c, ok := o.State.Calibration(); ok {
			t.UseBacklash(c.Backlash)
			s.log.Info("stored backlash calibration installed", "steps", c.Backlash, "measured", c.At, "freq", c.Freq)
		}
		s.notices = append(s.notices, o.State.Notices()...)
	}
	s.notices = append(s.notices, o.Notices...)
	s.mu.Lock()
	s.publishLocked()
	s.mu.Unlock()
	return s, nil
}

// Tuner gives the service's tuner, for setup before Run only: once Run has started, the tuner
// belongs to its goroutine.
func (s *Service) Tuner() *tune.Tuner { return s.tuner }

// Done is closed when Run has returned: the motor halted, the map saved.
func (s *Service) Done() <-chan struct{} { return s.done }

// CleanStop is the clean-stop marker the daemon should write once Run has returned: where the
// motor stood when the service halted it, and whether it was trusted then. ok is false while
// Run runs, and when the halt on the way out failed (the motor may not be at rest): then no
// marker must be written. Writing it is the daemon's business (it is the last write before it
// exits).
func (s *Service) CleanStop() (m statedir.Marker, ok bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.final == nil {
		return statedir.Marker{}, false
	}
	return *s.final, true
}

// Run serves requests until ctx ends, then stops the motor, drops any carrier, cancels the
// requests still waiting, saves the map and halts the axis. It returns nil on a normal shutdown,
// and an error if the axis could not be halted (write no clean-stop marker then). It may be
// called once.
func (s *Service) Run(ctx context.Context) (err error) {
	if !s.started.CompareAndSwap(false, true) {
		return errors.New("service: run: already started")
	}
	defer close(s.done)
	defer func() { err = s.shutdown() }()
	for {
		s.applyEdits() // between operations: see memory.go
		e, opCtx, cancel := s.next(ctx)
		if e == nil {
			if s.idle(ctx) != nil {
				return nil
			}
			continue
		}
		res := s.serve(opCtx, e)
		cancel()
		s.finish(e, res, ctx.Err() != nil)
		if ctx.Err() != nil {
			return nil
		}
	}
}

// idle waits, with nothing to run, for a request, a word to a follower, or the followers' next
// deadline, which it acts on. It returns ctx's error once ctx has ended.
func (s *Service) idle(ctx context.Context) error {
	var next time.Time
	for _, fl := range s.followerList() {
		if t := fl.Poll(); !t.IsZero() && (next.IsZero() || t.Before(next)) {
			next = t
		}
	}
	if next.IsZero() {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-s.wake:
			return nil
		}
	}
	sctx, cancel := context.WithCancel(ctx)
	defer cancel()
	s.mu.Lock()
	s.sleeping = cancel
	s.mu.Unlock()
	select {
	case <-s.wake: // woken before the sleep could be cut short
		cancel()
	default:
	}
	_ = s.d.Clock.Sleep(sctx, next.Sub(s.d.Clock.Now()))
	s.mu.Lock()
	s.sleeping = nil
	s.mu.Unlock()
	return ctx.Err()
}

// kick wakes Run's idle wait.
func (s *Service) kick() {
	select {
	case s.wake <- struct{}{}:
	default:
	}
	s.mu.Lock()
	if s.sleeping != nil {
		s.sleeping()
	}
	s.mu.Unlock()
}

func (s *Service) addFollower(fl *Follower) {
	s.mu.Lock()
	s.followers = append(s.followers, fl)
	s.mu.Unlock()
}

func (s *Service) followerList() []*Follower {
	s.mu.Lock()
	defer s.mu.Unlock()
	return slices.Clone(s.followers)
}

// next takes the request at the head of the queue and marks it running; nil if there is none
// or ctx has ended.
func (s *Service) next(ctx context.Context) (*entry, context.Context, context.CancelFunc) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if ctx.Err() != nil || len(s.queue) == 0 {
		return nil, nil, nil
	}
	e := s.queue[0]
	s.queue = s.queue[1:]
	opCtx, cancel := context.WithCancel(ctx)
	e.cancel = cancel
	e.st.State, e.st.Started = RequestRunning, s.d.Clock.Now()
	s.running = e
	s.live = Live{}
	s.emitStatusLocked(e)
	s.publishLocked()
	return e, &liveCtx{Context: opCtx, s: s}, cancel
}

// liveCtx is an operation's context. Every wait of an operation asks its context whether to go
// on (the tuner's guard asks its parent at every motor poll, reading and settling), so this is
// the one place that sees time pass during a move that takes no readings: it republishes the
// snapshot there, throttled, so that readers see the motor move.
type liveCtx struct {
	context.Context
	s *Service
}

// Err implements context.Context.
func (c *liveCtx) Err() error {
	c.s.tick()
	return c.Context.Err()
}

// tick republishes the snapshot if the throttle allows. It may be called from any goroutine
// holding none of the service's locks.
func (s *Service) tick() {
	if s.d.Clock.Now().UnixNano() < s.nextLive.Load() {
		return
	}
	s.mu.Lock()
	s.maybePublishLocked()
	s.mu.Unlock()
}

// finish books a request's end: its result and state, what it taught persisted, the caller's
// hook, then the news to subscribers and those waiting. stopping: Run is returning.
func (s *Service) finish(e *entry, res tune.Result, stopping bool) {
	s.mu.Lock()
	state := RequestDone
	if (e.st.By != 0 || stopping) && res.Outcome == tune.Aborted {
		state = RequestCancelled
	}
	st := e.st
	st.State, st.Result, st.Finished = state, &res, s.d.Clock.Now()
	s.mu.Unlock()
	s.guarded(func() { s.after(st, res) })
	s.mu.Lock()
	defer s.mu.Unlock()
	s.running = nil
	s.last, s.lastID = &res, st.ID
	// the snapshot first: whoever hears that the request is done finds it done in the snapshot
	s.publishLocked()
	s.finalLocked(e, state, 0, &res, st.Finished)
}

// serve runs one request, turning a panic anywhere in it into a latched fault.
func (s *Service) serve(ctx context.Context, e *entry) (res tune.Result) {
	r := e.st.Request
	now := s.d.Clock.Now()
	res = tune.Result{Outcome: tune.Fault, Freq: r.Freq, Started: now, Finished: now}
	s.guarded(func() { res = s.do(ctx, r) })
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
		s.noteFault()
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

// noteFault copies the tuner's latched fault for readers; on the service's goroutine only.
func (s *Service) noteFault() {
	msg := ""
	if err := s.tuner.Fault(); err != nil {
		msg = err.Error()
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if msg != s.fault {
		s.fault = msg
		s.publishLocked()
	}
}

func (s *Service) do(ctx context.Context, r Request) tune.Result {
	t := s.tuner
	switch r.Kind {
	case Follow:
		return t.Tune(ctx, tune.Request{Freq: r.Freq, RF: s.o.AutoTune})
	case Preposition:
		return t.Tune(ctx, tune.Request{Freq: r.Freq})
	case Tune:
		return t.Tune(ctx, tune.Request{Freq: r.Freq, RF: true})
	case Calibrate:
		return t.Calibrate(ctx, r.Freq)
	case Goto:
		return t.Goto(ctx, r.Step)
	case Home:
		return t.Home(ctx)
	case Reference:
		now := s.d.Clock.Now()
		res := tune.Result{Outcome: tune.Referenced, Started: now, Finished: now, Pos: r.Step}
		if err := t.Reference(r.Step); err != nil {
			res.Outcome, res.Err = tune.Fault, err
			res.Pos = s.d.Axis.Position()
		}
		return res
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
		res.Pos = s.d.Axis.Position()
		return res
	}
	return tune.Result{Outcome: tune.Fault, Err: fmt.Errorf("service: request kind %q", r.Kind)}
}

// after persists what the operation taught, notes the fault, and runs the caller's hook; on
// the service's goroutine, with the motor at rest.
func (s *Service) after(st RequestStatus, res tune.Result) {
	if s.store != nil {
		s.store.saveMap()
		if res.Outcome == tune.Calibrated {
			s.store.saveCalibration(tune.Calibration{Backlash: res.Backlash, At: res.Finished, Freq: res.Freq})
		}
		s.store.noteAxis(s.d.Axis.Snapshot())
	}
	s.noteFault()
	lvl := slog.LevelInfo
	if res.Err != nil {
		lvl = slog.LevelWarn
	}
	s.log.Log(context.Background(), lvl, "request done", "kind", st.Request.Kind, "outcome", res.Outcome, "freq", res.Freq,
		"err", res.Err, "id", st.ID, "source", st.Request.Source, "state", st.State, "pos", res.Pos)
	if s.o.AfterOperation != nil {
		s.o.AfterOperation(st)
	}
}

// shutdown runs as Run returns: waiting requests cancelled, the map saved, the axis halted,
// the final state published.
func (s *Service) shutdown() error {
	s.mu.Lock()
	s.stopped = true
	now := s.d.Clock.Now()
	for _, q := range s.queue {
		s.finalLocked(q, RequestCancelled, 0, nil, now)
	}
	s.queue = nil
	s.mu.Unlock()
	// The running operation has already stopped the motor and dropped the carrier on its way
	// out (its context was cancelled with ours); make the axis inert and keep what was learned.
	if s.store != nil {
		s.guarded(func() { s.store.saveMap() })
	}
	var err error
	if herr := s.d.Axis.Halt(); herr != nil {
		err = fmt.Errorf("service: halt on the way out: %w", herr)
		s.log.Error("the motor could not be halted on the way out", "err", herr)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	a := s.d.Axis.Snapshot()
	if err == nil {
		s.final = &statedir.Marker{Position: a.Position, Trusted: a.Trusted && a.Fault == "", At: s.d.Clock.Now(), Reason: "stopped"}
	}
	s.tstate = s.tuner.State()
	s.publishLocked()
	return err
}

// observe is the tuner's observer: it keeps the live figures, tells the subscribers, and
// republishes the snapshot (at once for changes of state, throttled for moves and readings).
func (s *Service) observe(e tune.Event) {
	if e.Result != nil {
		r := *e.Result // the tuner's own copy may change after the event
		e.Result = &r
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	var id RequestID
	if s.running != nil {
		id = s.running.st.ID
	}
	immediate := true
	switch e.Kind {
	case tune.KindState:
		s.tstate = e.State
	case tune.KindReading:
		s.live.At, s.live.Pos, s.live.SWR, s.live.Forward = e.At, e.Pos, e.SWR, e.Forward
		s.live.Reflected = physic.Power(e.Gamma2 * float64(e.Forward))
		s.live.Freq = e.Freq
		immediate = false
	case tune.KindFit:
		if e.Fit != nil {
			s.live.QLoaded, s.live.Bandwidth = e.Fit.QLoaded, e.Fit.Bandwidth
		}
	case tune.KindResult, tune.KindPrediction:
	default:
		immediate = false
	}
	s.emitLocked(Event{At: e.At, Kind: EventTune, Request: id, Tune: &e})
	if immediate {
		s.publishLocked()
	} else {
		s.maybePublishLocked()
	}
}

// maybePublishLocked republishes the snapshot if the last one is at least SnapshotInterval old.
func (s *Service) maybePublishLocked() {
	if s.d.Clock.Now().UnixNano() < s.nextLive.Load() {
		return
	}
	s.publishLocked()
}

// publishLocked builds and publishes the snapshot; the caller holds mu. It reads the axis's and
// the map's own snapshots, never the hardware.
func (s *Service) publishLocked() {
	now := s.d.Clock.Now()
	sn := &Snapshot{At: now, State: s.tstate, Axis: s.d.Axis.Snapshot(), Last: s.last, LastRequest: s.lastID,
		MapPoints: s.d.Map.Len(), Drift: s.d.Map.Drift(), Live: s.live, Radio: s.radio, Notices: s.notices,
		Fault: s.fault, Stopped: s.final != nil || s.stopped}
	if sn.Fault == "" {
		sn.Fault = sn.Axis.Fault
	}
	if r := s.running; r != nil {
		st := r.st
		sn.Running, sn.Busy, sn.Request, sn.Freq = &st, true, st.ID, st.Request.Freq
	} else if s.last != nil {
		sn.Freq = s.last.Freq
	}
	for _, q := range s.queue {
		sn.Queue = append(sn.Queue, q.st)
	}
	s.snap.Store(sn)
	s.nextLive.Store(now.Add(s.o.SnapshotInterval).UnixNano())
	s.emitLocked(Event{At: now, Kind: EventSnapshot, Request: sn.Request, Snapshot: sn})
}

// Snapshot returns the latest published state. It never blocks on the hardware.
func (s *Service) Snapshot() Snapshot { return *s.snap.Load() }

// noteRadio records what the frequency source last said, for the snapshot; a change of
// frequency, source or staleness is published at once.
func (s *Service) noteRadio(r RadioStatus) {
	s.mu.Lock()
	defer s.mu.Unlock()
	old := s.radio
	s.radio = r
	if old.Freq != r.Freq || old.Source != r.Source || old.Stale != r.Stale {
		s.publishLocked()
	}
}

// predictedBandwidth is the loop's loaded bandwidth at f as the memory map (or its prior)
// predicts it, or as the tuner's default Q gives it; Hz.
func (s *Service) predictedBandwidth(f physic.Frequency) float64 {
	q := s.defaultQ
	if p, ok := s.d.Map.Predict(f, s.d.Clock.Now(), nil); ok && p.Q > 0 {
		q = p.Q
	}
	return float64(f) / float64(physic.Hertz) / q
}

// Snapshot is the service's state as readers see it.
type Snapshot struct {
	At    time.Time
	State tune.State
	// Freq is the running operation's frequency, or the last one's.
	Freq physic.Frequency
	Busy bool
	// Request is the running request's ID (0: none); Running its status.
	Request RequestID
	Running *RequestStatus
	// Queue is what waits, in the order it will run.
	Queue []RequestStatus
	Axis  motion.AxisState
	// Last is the last finished operation's result, and LastRequest its request.
	Last        *tune.Result
	LastRequest RequestID
	// Live is the latest the tuner measured.
	Live      Live
	MapPoints int
	Drift     memmap.Drift
	// Radio is what the frequency source last said (see Follower).
	Radio RadioStatus
	Fault string // the latched fault, the tuner's or the axis's; empty if none
	// Notices are things the operator must hear of: damaged files set aside at the start,
	// Options.Notices.
	Notices []string
	// Stopped: Run has returned, or is returning.
	Stopped bool
}

// Live is the latest of what the tuner measured, republished during an operation. It is
// cleared when a request starts.
type Live struct {
	At        time.Time // of the latest reading
	Freq      physic.Frequency
	Pos       float64 // where the latest reading was taken, motor steps
	SWR       float64
	Forward   physic.Power
	Reflected physic.Power
	QLoaded   float64 // of the latest fit; 0 before one
	Bandwidth float64 // loaded bandwidth of the latest fit, Hz; 0 if unknown
}

// RadioStatus is what the radio's frequency source last said.
type RadioStatus struct {
	Freq   physic.Frequency // 0: never heard
	Source Source
	// Heard is when the source last said anything, as of the snapshot's publication (words
	// that change nothing do not republish it; Follower.Status has the latest).
	Heard time.Time
	// Stale: the source has said nothing for longer than the follower allows; Freq may no
	// longer be where the radio is.
	Stale bool
}

package controller

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/tune"
)

// Kind is what a request asks for.
type Kind string

// Request kinds.
const (
	// Follow: the radio moved to Freq. The loop pre-positions from the memory map at once (no
	// RF), and tunes with a carrier too if the service is configured to (Options.AutoTune).
	Follow Kind = "follow"
	// Preposition: move to the memory map's prediction for Freq, with no RF whatever AutoTune
	// says (a band change, before the operator has settled on a frequency).
	Preposition Kind = "preposition"
	// Tune: tune at Freq with a carrier now.
	Tune Kind = "tune"
	// Calibrate: measure the gear backlash at Freq (keys a carrier).
	Calibrate Kind = "calibrate"
	// Goto: move to Step (inside the soft limits, with the position trusted), no RF.
	Goto Kind = "goto"
	// Home: run the homing sequence.
	Home Kind = "home"
	// Reference: the operator says the motor stands at Step; the position is trusted from then.
	Reference Kind = "reference"
	// Reset: clear a latched fault (the position stays untrusted until homed or referenced).
	Reset Kind = "reset"
	// Stop: abandon whatever runs or waits, and stay where the motor stops.
	Stop Kind = "stop"
)

// kinds lists every request kind, for messages and tests.
var kinds = []Kind{Follow, Preposition, Tune, Calibrate, Goto, Home, Reference, Reset, Stop}

// Kinds returns every request kind.
func Kinds() []Kind { return slices.Clone(kinds) }

// hasFreq says whether a request of kind k is for a frequency (Request.Freq).
func (k Kind) hasFreq() bool {
	return k == Follow || k == Preposition || k == Tune || k == Calibrate
}

// Source says who asked for a request.
type Source string

// Request sources.
const (
	SourceAPI      Source = "api"      // a client of the HTTP API
	SourceRadio    Source = "radio"    // the radio's frequency, followed (CAT, the simulator)
	SourceOperator Source = "operator" // the operator at the daemon (a signal, the command line)
	SourceSchedule Source = "schedule" // a timer of the daemon's own (a periodic re-tune)
)

func (s Source) valid() bool {
	return s == SourceAPI || s == SourceRadio || s == SourceOperator || s == SourceSchedule
}

// Request is one piece of work for the service.
type Request struct {
	Kind   Kind
	Source Source
	Freq   physic.Frequency // Follow, Preposition, Tune, Calibrate
	Step   motion.Steps     // Goto, Reference
}

func (r Request) validate() error {
	var errs []error
	switch {
	case !slices.Contains(kinds, r.Kind):
		errs = append(errs, fmt.Errorf("request kind %q: want one of %v", r.Kind, kinds))
	case r.Kind.hasFreq() && r.Freq <= 0:
		errs = append(errs, fmt.Errorf("%s request: frequency %v: want more than 0", r.Kind, r.Freq))
	}
	if !r.Source.valid() {
		errs = append(errs, fmt.Errorf("request source %q: want api, radio, operator or schedule", r.Source))
	}
	return errors.Join(errs...)
}

// RequestID identifies a request: Submit returns it, results and events carry it. IDs count up
// from 1 in the order requests were submitted; 0 is no request.
type RequestID uint64

// RequestState is where a request is in its life.
type RequestState string

// Request states. The last three are final.
const (
	RequestQueued    RequestState = "queued"    // waiting its turn
	RequestRunning   RequestState = "running"   // the tuner is on it
	RequestDone      RequestState = "done"      // it ran to its end (whatever the outcome)
	RequestCancelled RequestState = "cancelled" // stopped while it ran, or cleared while it waited
	RequestReplaced  RequestState = "replaced"  // a newer request took its place before it ran
)

// Final says whether the request will change no more.
func (s RequestState) Final() bool {
	return s == RequestDone || s == RequestCancelled || s == RequestReplaced
}

// RequestStatus is a request's state and, once it has run, its result. Treat it as read-only:
// its Result is shared.
type RequestStatus struct {
	ID        RequestID
	Request   Request
	State     RequestState
	Submitted time.Time
	Started   time.Time // zero if it never ran
	Finished  time.Time // zero until it is final
	// By is the request that cancelled or replaced this one; 0 if none did (or the service
	// stopping cancelled it).
	By RequestID
	// Result is the operation's result, for a request that ran (Done, or Cancelled while it
	// ran); nil otherwise. A Stop has none.
	Result *tune.Result
}

// ErrUnknownRequest: no request has the ID, or it is older than the history keeps.
var ErrUnknownRequest = errors.New("unknown request")

// ErrStopped: the service's Run has returned; it takes no more requests.
var ErrStopped = errors.New("service stopped")

// The cancellation table: what a request that arrives does to the one that runs and to those
// that wait. It is the one place these rules live; doc.go shows it as a table, and
// TestCancellationTable checks every cell of it against the running service.
//
// The reasons. A new frequency (and a calibration, and an operator's goto, home or reference)
// makes whatever positions the loop for the old one pointless, and a carrier that is on would be
// on the wrong frequency: it cancels every positioning operation (follow, pre-position, tune,
// calibration, goto). A homing needs no RF and leaves the position known only if it finishes, so
// only a Stop interrupts it: everything else waits for it, as it waits for a reset or a
// reference (both instant). A reset cancels nothing and jumps the queue: it is what lets the rest
// run. Among the waiting, a newer request replaces an older one of its class (a newer frequency
// or goto replaces a waiting frequency or goto; a home, a reference or a reset replaces a waiting
// one of its own kind), so the queue holds at most one of each class. A Stop cancels what runs
// and clears what waits.
var cancelTable = map[Kind]rule{
	Stop:        {cancels: kinds, clears: true},
	Follow:      {cancels: positioning, replaces: positioning},
	Preposition: {cancels: positioning, replaces: positioning},
	Tune:        {cancels: positioning, replaces: positioning},
	Calibrate:   {cancels: positioning, replaces: positioning},
	Goto:        {cancels: positioning, replaces: positioning},
	Home:        {cancels: positioning, replaces: []Kind{Home}},
	Reference:   {cancels: positioning, replaces: []Kind{Reference}},
	Reset:       {replaces: []Kind{Reset}, front: true},
}

// positioning are the operations that put the loop somewhere for a purpose a newer request
// overrides.
var positioning = []Kind{Follow, Preposition, Tune, Calibrate, Goto}

// rule is one row of the cancellation table.
type rule struct {
	cancels  []Kind // running kinds it cancels; any other finishes first
	replaces []Kind // waiting kinds it takes the place of
	clears   bool   // it cancels every waiting request
	front    bool   // it goes to the head of the queue
}

// Cancels says whether a request of kind arriving cancels a running request of kind running
// (otherwise the running one finishes first).
func Cancels(arriving, running Kind) bool {
	return slices.Contains(cancelTable[arriving].cancels, running)
}

// Replaces says whether a request of kind arriving takes the place of a waiting request of kind
// waiting (which then never runs).
func Replaces(arriving, waiting Kind) bool {
	r := cancelTable[arriving]
	return r.clears || slices.Contains(r.replaces, waiting)
}

// entry is a request the service knows of.
type entry struct {
	st     RequestStatus
	cancel context.CancelFunc // while it runs
	done   chan struct{}      // closed when it is final
}

// Submit queues r and returns its ID, applying the cancellation table: r may cancel the running
// request and replace waiting ones (see Cancels and Replaces). A Stop acts at once and is done
// when Submit returns. A Goto outside the soft limits, and a Home where the tuner's options say
// there is no home switch, are refused here.
func (s *Service) Submit(r Request) (RequestID, error) {
	if err := r.validate(); err != nil {
		return 0, fmt.Errorf("service: submit: %w", err)
	}
	switch {
	case r.Kind == Goto:
		if lo, hi := s.d.Axis.SoftLimits(); r.Step < lo || r.Step > hi {
			return 0, fmt.Errorf("service: submit: goto %d: outside the soft limits %d–%d", r.Step, lo, hi)
		}
	case r.Kind == Home && !s.to.HasHome:
		// Homing an axis with no switch would end in a fault that only a reset clears.
		return 0, errors.New("service: submit: home: the loop has no home switch (reference it instead)")
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.stopped {
		return 0, fmt.Errorf("service: submit %s: %w", r.Kind, ErrStopped)
	}
	now := s.d.Clock.Now()
	s.nextID++
	e := &entry{st: RequestStatus{ID: s.nextID, Request: r, State: RequestQueued, Submitted: now}, done: make(chan struct{})}
	s.remember(e)
	id := e.st.ID
	rl := cancelTable[r.Kind]
	if run := s.running; run != nil && run.st.By == 0 && Cancels(r.Kind, run.st.Request.Kind) {
		run.st.By = id
		run.cancel()
		s.log.Info("request cancels the running one", "id", id, "kind", r.Kind, "cancels", run.st.ID, "running", run.st.Request.Kind)
	}
	keep := s.queue[:0]
	for _, q := range s.queue {
		if Replaces(r.Kind, q.st.Request.Kind) {
			state := RequestReplaced
			if rl.clears {
				state = RequestCancelled
			}
			s.finalLocked(q, state, id, nil, now)
			continue
		}
		keep = append(keep, q)
	}
	clear(s.queue[len(keep):])
	s.queue = keep
	switch {
	case r.Kind == Stop:
		// a Stop has done all it does once it has cancelled and cleared
		e.st.Started = now
		s.finalLocked(e, RequestDone, 0, nil, now)
	case rl.front:
		s.queue = slices.Insert(s.queue, 0, e)
		s.emitStatusLocked(e)
	default:
		s.queue = append(s.queue, e)
		s.emitStatusLocked(e)
	}
	s.publishLocked()
	select {
	case s.wake <- struct{}{}:
	default:
	}
	if s.sleeping != nil {
		s.sleeping()
	}
	return id, nil
}

// remember adds e to the history, forgetting the oldest final requests beyond its bound.
func (s *Service) remember(e *entry) {
	s.byID[e.st.ID] = e
	s.order = append(s.order, e.st.ID)
	for len(s.byID) > s.o.History {
		i := slices.IndexFunc(s.order, func(id RequestID) bool { return s.byID[id].st.State.Final() })
		if i < 0 {
			return // all waiting or running: the queue holds at most a handful
		}
		delete(s.byID, s.order[i])
		s.order = slices.Delete(s.order, i, i+1)
	}
}

// finalLocked makes e final: state, the request that caused it, the result; it tells the
// subscribers and wakes those waiting for it. The caller holds mu.
func (s *Service) finalLocked(e *entry, state RequestState, by RequestID, res *tune.Result, now time.Time) {
	e.st.State, e.st.Finished, e.st.Result = state, now, res
	if by != 0 {
		e.st.By = by
	}
	e.cancel = nil
	s.emitStatusLocked(e)
	close(e.done)
}

// Request returns what became of the request with the given ID, while the history holds it
// (Options.History requests, and every one still waiting or running).
func (s *Service) Request(id RequestID) (RequestStatus, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	e, ok := s.byID[id]
	if !ok {
		return RequestStatus{}, false
	}
	return e.st, true
}

// Wait blocks until the request with the given ID is final (done, cancelled or replaced), and
// returns its status; or until ctx ends. It fails with ErrUnknownRequest for an ID the history
// does not hold. Requests still waiting when Run returns are cancelled, so Wait returns then too.
func (s *Service) Wait(ctx context.Context, id RequestID) (RequestStatus, error) {
	s.mu.Lock()
	e, ok := s.byID[id]
	s.mu.Unlock()
	if !ok {
		return RequestStatus{}, fmt.Errorf("service: wait for request %d: %w", id, ErrUnknownRequest)
	}
	select {
	case <-e.done:
	case <-ctx.Done():
		return RequestStatus{}, fmt.Errorf("service: wait for request %d: %w", id, ctx.Err())
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	return e.st, nil
}

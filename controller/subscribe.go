package controller

import (
	"sync"
	"sync/atomic"
	"time"

	"github.com/tankd/tankd/controller/tune"
)

// EventKind says what an Event carries.
type EventKind string

// Event kinds.
const (
	// EventTune: a step of the tuner's work (Tune): state changes, predictions, moves,
	// readings, noise, fits, notes and results.
	EventTune EventKind = "tune"
	// EventRequest: a request changed state (Status): queued, running, and its final state with
	// the result.
	EventRequest EventKind = "request"
	// EventSnapshot: the service's state was republished (Snapshot): at every change of state
	// and request, and during an operation at most every Options.SnapshotInterval.
	EventSnapshot EventKind = "snapshot"
)

// Event is one thing that happened in the service, as subscribers and the backlog see it.
// Exactly one of Tune, Status and Snapshot is set, as Kind says. Events are shared between
// subscribers: treat them as read-only.
type Event struct {
	// Seq numbers the service's events from 1, without gaps, in the order they happened; a
	// subscriber that dropped some sees the gap, and EventsSince resumes after any it saw.
	Seq  uint64
	At   time.Time
	Kind EventKind
	// Request is the request the event belongs to: the one that ran when the tuner reported it,
	// the one whose state changed, the one running at a snapshot; 0 for none.
	Request  RequestID
	Tune     *tune.Event
	Status   *RequestStatus
	Snapshot *Snapshot
}

// Subscription is one listener's queue of events. It holds at most its depth; when it is full
// the oldest event is dropped (and counted) to make room, so a subscriber that falls behind
// loses old events, never the newest, and never holds up the tuner.
type Subscription struct {
	s       *Service
	ch      chan Event
	dropped atomic.Uint64
	once    sync.Once
}

// Subscribe starts a subscription that receives every event from now on, up to depth of them
// waiting (at least 1). The caller must Close it when done. To resume a stream, subscribe first
// and then read EventsSince, skipping events already seen by Seq: an event published in between
// is in both.
func (s *Service) Subscribe(depth int) *Subscription {
	sub := &Subscription{s: s, ch: make(chan Event, max(depth, 1))}
	s.evmu.Lock()
	s.subs[sub] = struct{}{}
	s.evmu.Unlock()
	return sub
}

// Events is the subscription's channel. It is closed by Close.
func (sub *Subscription) Events() <-chan Event { return sub.ch }

// Dropped counts the events dropped because the subscription was full.
func (sub *Subscription) Dropped() uint64 { return sub.dropped.Load() }

// Close ends the subscription and closes its channel; events still in it can be read. It may
// be called more than once, from any goroutine.
func (sub *Subscription) Close() {
	sub.once.Do(func() {
		s := sub.s
		s.evmu.Lock()
		delete(s.subs, sub)
		close(sub.ch)
		s.evmu.Unlock()
	})
}

// deliver queues e, dropping the oldest waiting event if the queue is full. Only the publisher
// sends, under evmu, so after one event is taken out there is room.
func (sub *Subscription) deliver(e Event) {
	select {
	case sub.ch <- e:
		return
	default:
	}
	select {
	case <-sub.ch:
		sub.dropped.Add(1)
	default: // the subscriber took one meanwhile
	}
	select {
	case sub.ch <- e:
	default:
		sub.dropped.Add(1)
	}
}

// emitLocked numbers e, keeps it in the backlog and hands it to every subscriber. The caller
// holds mu, so that events are numbered in the order the service's state changed.
func (s *Service) emitLocked(e Event) {
	if e.At.IsZero() {
		e.At = s.d.Clock.Now()
	}
	s.evmu.Lock()
	defer s.evmu.Unlock()
	s.seq++
	e.Seq = s.seq
	if len(s.backlog) < cap(s.backlog) {
		s.backlog = append(s.backlog, e)
	} else {
		s.backlog[s.head] = e
		s.head = (s.head + 1) % len(s.backlog)
	}
	for sub := range s.subs {
		sub.deliver(e)
	}
}

// emitStatusLocked tells the subscribers of e's state.
func (s *Service) emitStatusLocked(e *entry) {
	st := e.st
	s.emitLocked(Event{Kind: EventRequest, Request: st.ID, Status: &st})
}

// EventsSince returns the events after seq that the backlog still holds (the last
// Options.Backlog events), oldest first. complete is false when some events after seq are no
// longer held: the caller has missed them, and should read the Snapshot afresh. EventsSince(0)
// asks for everything held.
func (s *Service) EventsSince(seq uint64) (events []Event, complete bool) {
	s.evmu.Lock()
	defer s.evmu.Unlock()
	n := len(s.backlog)
	if seq >= s.seq {
		return nil, true
	}
	if n == 0 {
		return nil, false
	}
	oldest := s.backlog[s.head].Seq
	complete = seq+1 >= oldest
	for i := range n {
		e := s.backlog[(s.head+i)%n]
		if e.Seq > seq {
			events = append(events, e)
		}
	}
	return events, complete
}

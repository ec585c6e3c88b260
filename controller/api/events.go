package api

import (
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"time"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/tune"
)

// The event stream (GET /api/v1/events): server-sent events, each with the service's event
// number as its id and its kind as its event name, and JSON data. Kinds: the tuner's steps by
// their tune.Kind (state, prediction, positioned, move, reading, noise, dip, fit, result,
// note), request (a request changed state), snapshot (the status afresh), and gap (events were
// lost to this stream: read the status afresh).

const (
	// readingInterval is the least time, on the service's clock, between two readings sent to
	// one client: 20 a second, as fast as a person follows a moving figure (common practice for
	// status displays, and the service's own snapshot rate). The snapshots carry the latest
	// reading in between.
	readingInterval = 50 * time.Millisecond
	// streamDepth is each stream's queue of events not yet sent: a whole scan's worth, so that
	// a client on a slow link loses events only when the link cannot carry them at all; what is
	// dropped is filled in from the service's backlog where it still can be.
	streamDepth = 1024
	// writeStall is how long one write to a client may block before the stream gives up on it,
	// on the wall clock (the server's own write timeout is lifted for a stream).
	writeStall = 30 * time.Second
)

// stream is one client's event stream.
type stream struct {
	a  *API
	w  http.ResponseWriter
	rc *http.ResponseController
	// last is the number of the last service event dealt with (sent, or left out on purpose).
	last uint64
	// lastReading is when the last reading sent was taken; zero before one.
	lastReading time.Time
	err         error // the first write error: the client has gone
}

func (a *API) events(w http.ResponseWriter, r *http.Request) error {
	since, resume, err := resumePoint(r)
	if err != nil {
		return err
	}
	if r.Method == http.MethodHead {
		// The headers a stream would have, and no stream: HEAD has no body to send it in.
		w.Header().Set("Content-Type", "text/event-stream")
		w.Header().Set("Cache-Control", "no-store")
		return nil
	}
	a.mu.Lock()
	if a.closed {
		a.mu.Unlock()
		return &apiError{Status: http.StatusServiceUnavailable, Message: "shutting down"}
	}
	a.streams.Add(1)
	a.mu.Unlock()
	defer a.streams.Done()

	sub := a.s.Subscribe(streamDepth)
	defer sub.Close()
	held, _ := a.s.EventsSince(0) // after Subscribe: every event is in one or the other
	var newest uint64
	if n := len(held); n > 0 {
		newest = held[n-1].Seq
	}

	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Accel-Buffering", "no") // a reverse proxy must not hold events back
	w.WriteHeader(http.StatusOK)
	st := &stream{a: a, w: w, rc: http.NewResponseController(w)}
	switch {
	case resume && since > newest:
		// Numbers from before the daemon restarted: they count again from 1.
		st.gap(since, 0, "the event numbers restarted (the daemon restarted)")
		st.last = newest
		st.snapshot()
	case resume:
		st.last = since
		st.catchUp(newest + 1)
	default:
		st.last = newest
		st.snapshot()
	}
	st.flush()

	beat := time.NewTicker(a.o.Heartbeat)
	defer beat.Stop()
	for st.err == nil {
		select {
		case <-r.Context().Done():
			return nil
		case <-a.closing:
			return nil
		case <-a.s.Done():
			// The service has stopped: what it said last, then the end.
			for {
				select {
				case ev, ok := <-sub.Events():
					if ok {
						st.deliver(ev)
						continue
					}
				default:
				}
				st.flush()
				return nil
			}
		case <-beat.C:
			st.write(": keep-alive\n\n")
			st.flush()
		case ev, ok := <-sub.Events():
			if !ok {
				return nil
			}
			st.deliver(ev)
			// Send what else is waiting before flushing: one flush for a burst.
			for more := true; more && st.err == nil; {
				select {
				case ev, ok := <-sub.Events():
					if !ok {
						return nil
					}
					st.deliver(ev)
				default:
					more = false
				}
			}
			st.flush()
		}
	}
	return nil
}

// resumePoint reads where a client resumes: the Last-Event-ID header (a browser's EventSource
// sends it when it reconnects) or ?since=.
func resumePoint(r *http.Request) (seq uint64, ok bool, err error) {
	if v := r.Header.Get("Last-Event-ID"); v != "" {
		seq, err = parseSeq(v, "Last-Event-ID")
		return seq, err == nil, err
	}
	if v := r.URL.Query().Get("since"); v != "" {
		seq, err = parseSeq(v, "since")
		return seq, err == nil, err
	}
	return 0, false, nil
}

// deliver sends ev, after filling in from the backlog any events the subscription dropped.
func (st *stream) deliver(ev controller.Event) {
	if ev.Seq <= st.last {
		return // sent already, from the backlog
	}
	if ev.Seq > st.last+1 {
		st.catchUp(ev.Seq)
	}
	st.send(ev)
}

// catchUp sends the backlog's events after st.last and before upto, saying so with a gap event
// where the backlog no longer holds some of them.
func (st *stream) catchUp(upto uint64) {
	evs, complete := st.a.s.EventsSince(st.last)
	if !complete {
		next := upto
		if len(evs) > 0 && evs[0].Seq < next {
			next = evs[0].Seq
		}
		st.gap(st.last, next, "events were dropped: the client fell behind, or resumed from further back than the backlog holds")
	}
	for _, e := range evs {
		if e.Seq >= upto || st.err != nil {
			break
		}
		st.send(e)
	}
}

// send writes one service event, leaving out readings beyond the rate a client is sent.
func (st *stream) send(ev controller.Event) {
	st.last = ev.Seq
	var name string
	var data any
	switch ev.Kind {
	case controller.EventTune:
		if ev.Tune == nil {
			return
		}
		if ev.Tune.Kind == tune.KindReading {
			at := ev.Tune.At
			if !st.lastReading.IsZero() && at.Sub(st.lastReading) < readingInterval && at.Sub(st.lastReading) >= 0 {
				return
			}
			st.lastReading = at
		}
		name, data = string(ev.Tune.Kind), tuneEventOf(ev)
	case controller.EventRequest:
		if ev.Status == nil {
			return
		}
		name, data = "request", requestEventJSON{Seq: ev.Seq, requestJSON: requestOf(*ev.Status)}
	case controller.EventSnapshot:
		if ev.Snapshot == nil {
			return
		}
		s := st.a.statusOf(*ev.Snapshot, false)
		s.Seq = ev.Seq
		name, data = "snapshot", s
	default:
		return
	}
	st.event(fmt.Sprintf("id: %d\n", ev.Seq), name, data)
}

// snapshot sends the status as it stands, without an id: it is no event of the service's.
func (st *stream) snapshot() { st.event("", "snapshot", st.a.statusOf(st.a.s.Snapshot(), true)) }

func (st *stream) gap(after, resumesAt uint64, why string) {
	st.event("", "gap", gapJSON{After: after, ResumesAt: resumesAt, Reason: why})
}

// event writes one event: its id line (if any), its name and its data, on one line of JSON.
func (st *stream) event(id, name string, data any) {
	b, err := json.Marshal(data)
	if err != nil {
		st.a.log.Error("event not sent: encoding failed", "event", name, "err", err)
		return
	}
	st.write(id + "event: " + name + "\ndata: " + string(b) + "\n\n")
}

func (st *stream) write(s string) {
	if st.err != nil {
		return
	}
	// A deadline for each write: a client that stops reading is let go, however long the
	// stream lives. Writers without deadlines (tests' recorders) do without.
	_ = st.rc.SetWriteDeadline(time.Now().Add(writeStall))
	_, st.err = st.w.Write([]byte(s))
}

func (st *stream) flush() {
	if st.err == nil {
		if err := st.rc.Flush(); err != nil && !errors.Is(err, http.ErrNotSupported) {
			st.err = err
		}
	}
}

package api

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"io"
	"net/http"
	"net/http/httptest"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/tune"
)

// sse is one server-sent event, or a comment.
type sse struct {
	id         string // "" when the event has none
	name, data string
	comment    string
}

func (ev sse) seq(t *testing.T) uint64 {
	t.Helper()
	n, err := strconv.ParseUint(ev.id, 10, 64)
	if err != nil {
		t.Fatalf("event %s %s: id %q", ev.name, ev.data, ev.id)
	}
	return n
}

// readSSE reads the next event (or comment) from a stream.
func readSSE(br *bufio.Reader) (sse, error) {
	var ev sse
	seen := false
	for {
		line, err := br.ReadString('\n')
		if err != nil {
			return ev, err
		}
		line = strings.TrimSuffix(line, "\n")
		switch {
		case line == "":
			if seen {
				return ev, nil
			}
		case strings.HasPrefix(line, ":"):
			ev.comment, seen = strings.TrimSpace(line[1:]), true
		default:
			k, v, _ := strings.Cut(line, ": ")
			switch k {
			case "id":
				ev.id = v
			case "event":
				ev.name = v
			case "data":
				ev.data = v
			default:
				return ev, errors.New("unexpected line " + line)
			}
			seen = true
		}
	}
}

// streamer is an event stream from a test server.
type streamer struct {
	t  *testing.T
	br *bufio.Reader
}

// stream opens the event stream; query and the Last-Event-ID header (if not "") say where it
// resumes. It is closed when the test ends, before the server.
func openStream(t *testing.T, ts *httptest.Server, query, lastID string) *streamer {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), fakeservice.Safety)
	req, err := http.NewRequestWithContext(ctx, "GET", ts.URL+"/api/v1/events"+query, nil)
	if err != nil {
		t.Fatal(err)
	}
	if lastID != "" {
		req.Header.Set("Last-Event-ID", lastID)
	}
	resp, err := ts.Client().Do(req)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cancel(); resp.Body.Close() })
	if resp.StatusCode != http.StatusOK || resp.Header.Get("Content-Type") != "text/event-stream" {
		b, _ := io.ReadAll(resp.Body)
		t.Fatalf("events: %d %s: %s", resp.StatusCode, resp.Header.Get("Content-Type"), b)
	}
	return &streamer{t: t, br: bufio.NewReader(resp.Body)}
}

// next reads the next event, skipping keep-alive comments.
func (s *streamer) next() sse {
	s.t.Helper()
	for {
		ev, err := readSSE(s.br)
		if err != nil {
			s.t.Fatalf("event stream: %v", err)
		}
		if ev.comment == "" {
			return ev
		}
	}
}

func server(t *testing.T, e *env) *httptest.Server {
	ts := httptest.NewServer(e.a)
	t.Cleanup(ts.Close)
	return ts
}

// The event stream shows a tune's states in the order the service's own subscribers see them,
// numbered in order, with the readings at most 20 a second, and ends with the request done.
func TestEventsInOrder(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.rig.Loop.Radio.SetFrequency(f80)
	e.start()
	ts := server(t, e)
	direct := e.rig.Service.Subscribe(1 << 16) // more than a whole tune's events
	defer direct.Close()
	s := openStream(t, ts, "", "")
	if ev := s.next(); ev.name != "snapshot" || ev.id != "" || !strings.Contains(ev.data, `"state":"idle"`) {
		t.Fatalf("the stream's first event: %+v, want a snapshot without an id", ev)
	}
	id := e.accepted(e.do("POST", "/api/v1/tune", hzBody(f80)), "tune")
	var states []string
	var prev uint64
	var lastReading time.Time
	kinds := map[string]int{}
	for done := false; !done; {
		ev := s.next()
		kinds[ev.name]++
		n := ev.seq(t)
		if n <= prev {
			t.Fatalf("event %d (%s) after %d", n, ev.name, prev)
		}
		prev = n
		var d struct {
			Seq       uint64    `json:"seq"`
			ID        uint64    `json:"id"`
			RequestID uint64    `json:"request_id"`
			State     string    `json:"state"`
			Final     bool      `json:"final"`
			At        time.Time `json:"at"`
		}
		if err := json.Unmarshal([]byte(ev.data), &d); err != nil {
			t.Fatalf("event %s: %s: %v", ev.name, ev.data, err)
		}
		switch ev.name {
		case "gap":
			t.Fatalf("a gap in a stream that kept up: %s", ev.data)
		case "state":
			if d.RequestID == uint64(id) {
				states = append(states, d.State)
			}
		case "reading":
			// 50 ms apart at least: the API's per-client rate of 20 readings a second.
			if !lastReading.IsZero() && d.At.Sub(lastReading) < 50*time.Millisecond {
				t.Fatalf("readings at %v and %v: closer than 50 ms", lastReading, d.At)
			}
			lastReading = d.At
		case "request", "snapshot":
			if d.Seq != n {
				t.Fatalf("%s event %d carries seq %d", ev.name, n, d.Seq)
			}
			done = ev.name == "request" && d.ID == uint64(id) && d.Final
		}
	}
	e.rig.Wait(t, id)
	var want []string
	for ev := range direct.Events() {
		if ev.Kind == controller.EventTune && ev.Tune.Kind == tune.KindState && ev.Request == id {
			want = append(want, string(ev.Tune.State))
		}
		if ev.Kind == controller.EventRequest && ev.Status.ID == id && ev.Status.State.Final() {
			break
		}
	}
	if !slices.Equal(states, want) || len(want) < 5 || want[0] != string(tune.Positioning) || want[len(want)-1] != string(tune.Idle) {
		t.Fatalf("states in the stream %v, the service's %v", states, want)
	}
	for _, k := range []string{"prediction", "move", "reading", "fit", "result", "request", "snapshot"} {
		if kinds[k] == 0 {
			t.Errorf("no %s event in a whole tune (%v)", k, kinds)
		}
	}
}

// A client resuming with Last-Event-ID (or ?since) gets the events after it from the backlog,
// from the very next one, every one but readings beyond the rate, in order.
func TestEventsResume(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.rig.Loop.Radio.SetFrequency(f80)
	e.start()
	ts := server(t, e)
	e.rig.Wait(t, e.accepted(e.do("POST", "/api/v1/tune", hzBody(f80)), "tune"))
	held, complete := e.rig.Service.EventsSince(0)
	if !complete || len(held) < 20 {
		t.Fatalf("the backlog: %d events (complete %v)", len(held), complete)
	}
	k := held[10].Seq
	var want []uint64 // every event after k but the readings
	for _, ev := range held[11:] {
		if ev.Kind != controller.EventTune || ev.Tune.Kind != tune.KindReading {
			want = append(want, ev.Seq)
		}
	}
	for _, c := range []struct{ query, header string }{{"", strconv.FormatUint(k, 10)}, {"?since=" + strconv.FormatUint(k, 10), ""}} {
		s := openStream(t, ts, c.query, c.header)
		var got []uint64
		first := true
		for len(got) < len(want) {
			ev := s.next()
			if ev.name == "gap" || ev.id == "" {
				t.Fatalf("resuming after %d: %+v", k, ev)
			}
			n := ev.seq(t)
			if first && n != k+1 {
				t.Fatalf("resuming after %d: the first event is %d", k, n)
			}
			first = false
			if ev.name != "reading" {
				got = append(got, n)
			}
		}
		if !slices.Equal(got, want) {
			t.Fatalf("resuming after %d: %v, want %v", k, got, want)
		}
	}
}

// A client resuming from further back than the backlog holds is told so with a gap event,
// and the stream goes on from the oldest event held; one with a number from before a restart
// is told so too, and starts afresh.
func TestEventsGap(t *testing.T) {
	e := newEnv(t, fakeservice.Options{Service: controller.Options{Backlog: 16}}, Options{})
	e.rig.Loop.Radio.SetFrequency(f80)
	e.start()
	ts := server(t, e)
	e.rig.Wait(t, e.accepted(e.do("POST", "/api/v1/tune", hzBody(f80)), "tune"))
	held, _ := e.rig.Service.EventsSince(0)
	oldest, newest := held[0].Seq, held[len(held)-1].Seq
	s := openStream(t, ts, "", "1")
	ev := s.next()
	var g gapJSON
	if err := json.Unmarshal([]byte(ev.data), &g); ev.name != "gap" || ev.id != "" || err != nil || g.After != 1 || g.ResumesAt != oldest {
		t.Fatalf("resuming after 1 with %d–%d held: %+v, want a gap resuming at %d", oldest, newest, ev, oldest)
	}
	if ev := s.next(); ev.seq(t) != oldest {
		t.Fatalf("after the gap: %+v, want event %d", ev, oldest)
	}

	s = openStream(t, ts, "", strconv.FormatUint(newest+1000, 10))
	ev = s.next()
	if err := json.Unmarshal([]byte(ev.data), &g); ev.name != "gap" || err != nil || !strings.Contains(g.Reason, "restarted") {
		t.Fatalf("resuming from a number not yet given: %+v", ev)
	}
	if ev := s.next(); ev.name != "snapshot" || ev.id != "" {
		t.Fatalf("after a restart's gap: %+v, want a fresh snapshot", ev)
	}
}

// Events a stream's queue dropped are filled in from the backlog before the next one is sent.
func TestStreamFillsDropsFromTheBacklog(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.rig.Loop.Radio.SetFrequency(f80)
	e.start()
	e.rig.Wait(t, e.accepted(e.do("POST", "/api/v1/tune", hzBody(f80)), "tune"))
	held, _ := e.rig.Service.EventsSince(0)
	var nonReadings []controller.Event
	for _, ev := range held {
		if ev.Kind != controller.EventTune || ev.Tune.Kind != tune.KindReading {
			nonReadings = append(nonReadings, ev)
		}
	}
	from, to := nonReadings[3], nonReadings[9] // events between them were "dropped"
	w := httptest.NewRecorder()
	st := &stream{a: e.a, w: w, rc: http.NewResponseController(w), last: from.Seq}
	st.deliver(to)
	var want []string
	for _, ev := range nonReadings[4:10] {
		want = append(want, "id: "+strconv.FormatUint(ev.Seq, 10))
	}
	var got []string
	for _, line := range strings.Split(w.Body.String(), "\n") {
		if strings.HasPrefix(line, "id: ") {
			got = append(got, line)
		}
	}
	// Readings in between are sent too, within the rate: compare the rest.
	got = slices.DeleteFunc(got, func(l string) bool {
		n, _ := strconv.ParseUint(strings.TrimPrefix(l, "id: "), 10, 64)
		return !slices.ContainsFunc(nonReadings, func(ev controller.Event) bool { return ev.Seq == n })
	})
	if !slices.Equal(got, want) || strings.Contains(w.Body.String(), "event: gap") {
		t.Fatalf("filled in %v, want %v:\n%s", got, want, w.Body.String())
	}
}

// A stream with nothing to say sends keep-alive comments.
func TestEventsHeartbeat(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{Heartbeat: time.Millisecond})
	e.start()
	s := openStream(t, server(t, e), "", "")
	for {
		ev, err := readSSE(s.br)
		if err != nil {
			t.Fatalf("no keep-alive before the stream ended: %v", err)
		}
		if ev.comment == "keep-alive" {
			return
		}
	}
}

// Streams end when the API is closed (the server shutting down) and refuse to start after;
// they end too when the service stops.
func TestEventsEnd(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.start()
	ts := server(t, e)
	s := openStream(t, ts, "", "")
	s.next()
	e.a.Close()
	if _, err := io.ReadAll(s.br); err != nil {
		t.Fatalf("the stream after Close: %v, want its end", err)
	}
	apiErr(t, e.do("GET", "/api/v1/events", ""), http.StatusServiceUnavailable, "", "a stream after Close")

	e2 := newEnv(t, fakeservice.Options{}, Options{})
	stop := e2.start()
	s = openStream(t, server(t, e2), "", "")
	s.next()
	stop()
	if _, err := io.ReadAll(s.br); err != nil {
		t.Fatalf("the stream after the service stopped: %v, want its end", err)
	}
}

// HEAD on the stream answers with its headers and ends, rather than streaming into nothing.
func TestEventsHead(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	w := e.do("HEAD", "/api/v1/events", "")
	if expect(t, w, http.StatusOK, "HEAD"); w.Header().Get("Content-Type") != "text/event-stream" {
		t.Fatalf("HEAD /api/v1/events: %v", w.Header())
	}
}

package api

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeloop"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/tune"
)

// A tune asked for through the API, followed by its ID to the end: tuned, and the status then
// shows the loop idle at that frequency with the SWR the tune verified.
func TestTuneThroughTheAPI(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{Version: "test"})
	e.start()
	e.rig.Loop.Radio.SetFrequency(f80)
	id := e.accepted(e.do("POST", "/api/v1/tune", hzBody(f80)), "tune")
	w := e.do("GET", idPath(id)+"?wait=20s", "")
	expect(t, w, http.StatusOK, "request")
	rq := object(t, w)
	res, _ := rq["result"].(map[string]any)
	if rq["state"] != "done" || rq["final"] != true || rq["kind"] != "tune" || rq["source"] != "api" || res == nil || res["outcome"] != "tuned" {
		t.Fatalf("request %d: %s", id, w.Body.String())
	}
	st := e.rig.Wait(t, id)
	w = e.do("GET", "/api/v1/status", "")
	expect(t, w, http.StatusOK, "status")
	s := object(t, w)
	swr := strconv.FormatFloat(st.Result.SWR, 'g', -1, 64)
	for k, want := range map[string]string{
		"busy": "false", "outcome": "tuned", "state": "idle", "frequency_hz": "3750000", "swr": swr,
		"request_id": strconv.FormatUint(uint64(id), 10), "position_steps": strconv.FormatInt(st.Result.Pos, 10),
		"position_trusted": "true", "map_points": "1", "fault": "null", "link": linkNone, "version": "test",
	} {
		if got := str(s[k]); got != want {
			t.Errorf("status %s = %s, want %s", k, got, want)
		}
	}
	if str(res["swr"]) != swr || str(res["position_steps"]) != str(s["position_steps"]) {
		t.Errorf("result %v against the status %v", res, s)
	}
	for _, k := range []string{"forward_w", "reflected_w", "q_loaded"} {
		if s[k] == nil {
			t.Errorf("status %s is null after a tune", k)
		}
	}
}

// POST /api/v1/frequency moves the radio's VFO and is decided by the follower at once: a
// Follow the first time, nothing the second; a radio that refuses gets nothing submitted.
func TestSetFrequency(t *testing.T) {
	var refuse error
	var moved []physic.Frequency
	var e *env
	e = newEnv(t, fakeservice.Options{Follower: &controller.FollowOptions{StaleAfter: -1}}, Options{
		SetFrequency: func(f physic.Frequency) error {
			if refuse != nil {
				return refuse
			}
			moved = append(moved, f)
			e.rig.Loop.Radio.SetFrequency(f)
			return nil
		}})
	e.start()
	id := e.accepted(e.do("POST", "/api/v1/frequency", hzBody(f160)), "frequency")
	st := e.rig.Wait(t, id)
	if st.Request.Kind != controller.Follow || st.Request.Freq != f160 || st.Result.Outcome != tune.Positioned {
		t.Fatalf("the follow: %+v, %+v", st.Request, st.Result)
	}
	if !slices.Equal(moved, []physic.Frequency{f160}) || e.rig.Loop.Radio.Frequency() != f160 {
		t.Fatalf("the radio was moved to %v, want %v", moved, f160)
	}
	w := e.do("POST", "/api/v1/frequency", hzBody(f160))
	expect(t, w, http.StatusOK, "the same frequency again")
	if m := object(t, w); m["request_id"] != nil || str(m["frequency_hz"]) != "1850000" {
		t.Fatalf("the same frequency again: %s", w.Body.String())
	}
	w = e.do("GET", "/api/v1/status", "")
	if s := object(t, w); s["link"] != linkHeard || str(s["radio"].(map[string]any)["frequency_hz"]) != "1850000" {
		t.Fatalf("status after a frequency was set: link %v, radio %v", s["link"], s["radio"])
	}
	refuse = errors.New("radio: busy transmitting")
	before := e.rig.Service.Snapshot().LastRequest
	apiErr(t, e.do("POST", "/api/v1/frequency", hzBody(f80)), http.StatusBadGateway, "hz", "a radio that refuses")
	if sn := e.rig.Service.Snapshot(); sn.LastRequest != before || sn.Busy || len(sn.Queue) != 0 {
		t.Fatalf("a refused frequency submitted something: %+v", sn)
	}
}

// Without a follower, a frequency is submitted as a Follow directly.
func TestSetFrequencyWithoutFollower(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.start()
	id := e.accepted(e.do("POST", "/api/v1/frequency", `{"hz": 3700000.5}`), "frequency")
	if st := e.rig.Wait(t, id); st.Request.Kind != controller.Follow || st.Request.Freq != f80b+physic.Hertz/2 || st.Request.Source != controller.SourceAPI {
		t.Fatalf("the follow: %+v", st.Request)
	}
}

// A stop wins during a homing: the homing is cancelled at once, and the answer says so.
func TestStopWinsDuringHoming(t *testing.T) {
	e := newEnv(t, fakeservice.Options{Loop: fakeloop.Options{HomeSwitch: true}, Untrusted: true}, Options{})
	home := e.accepted(e.do("POST", "/api/v1/home", ""), "home")
	var stop controller.RequestID
	var reply string
	e.rig.Loop.Clock.OnSleep(fakeservice.Until(func() bool {
		if sn := e.rig.Service.Snapshot(); sn.Request != home || sn.State != tune.Homing {
			return false
		}
		w := e.do("POST", "/api/v1/stop", "")
		reply = w.Body.String()
		if w.Code == http.StatusAccepted {
			stop = e.accepted(w, "stop")
		}
		return true
	}))
	e.start()
	st := e.rig.Wait(t, home)
	if stop == 0 {
		t.Fatalf("the stop during the homing: %s", reply)
	}
	if st.State != controller.RequestCancelled || st.By != stop || st.Result.Outcome != tune.Aborted {
		t.Fatalf("the homing: %s by %d, %+v; want cancelled by the stop %d", st.State, st.By, st.Result, stop)
	}
	m := decodeMap(t, []byte(reply))
	if m["state"] != "done" || str(m["cancelled"]) != fmt.Sprintf("[%d]", home) {
		t.Fatalf("the stop's answer: %s; want done, cancelling %d", reply, home)
	}
	if e.rig.Axis.Snapshot().Moving || e.rig.Axis.Trusted() {
		t.Fatalf("after the stopped homing: %+v", e.rig.Axis.Snapshot())
	}
}

// Many tunes at once: each is accepted with its own ID, the last one runs to its end, and every
// other ends cancelled or replaced by a later one (or done, if it ended before the next came),
// as each answer said.
func TestConcurrentTunes(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.rig.Loop.Radio.SetFrequency(f80)
	e.start()
	const n = 8
	replies := make([]acceptedJSON, n)
	codes := make([]int, n)
	var wg sync.WaitGroup
	for i := range n {
		wg.Go(func() {
			w := e.do("POST", "/api/v1/tune", hzBody(f80))
			codes[i] = w.Code
			_ = json.Unmarshal(w.Body.Bytes(), &replies[i])
		})
	}
	wg.Wait()
	var ids []controller.RequestID
	for i, a := range replies {
		if codes[i] != http.StatusAccepted || a.RequestID == 0 {
			t.Fatalf("tune %d: %d %+v", i, codes[i], a)
		}
		ids = append(ids, controller.RequestID(a.RequestID))
	}
	slices.Sort(ids)
	if len(slices.Compact(slices.Clone(ids))) != n {
		t.Fatalf("IDs %v are not all different", ids)
	}
	last := e.rig.Wait(t, ids[n-1])
	if last.State != controller.RequestDone || last.Result.Outcome != tune.Tuned {
		t.Fatalf("the last tune: %s, %+v", last.State, last.Result)
	}
	for _, id := range ids[:n-1] {
		st := e.rig.Wait(t, id)
		switch st.State {
		case controller.RequestCancelled, controller.RequestReplaced:
			if st.By <= id {
				t.Fatalf("request %d %s by %d, not by a later one", id, st.State, st.By)
			}
		case controller.RequestDone:
		default:
			t.Fatalf("request %d: %s", id, st.State)
		}
	}
	for _, a := range replies {
		for _, c := range a.Cancelled {
			// A cancelled operation stops at its next check; one that was already finishing
			// ends done (on the virtual clock a whole tune takes microseconds, so this race is
			// real here). Either way, no one else ended it.
			st := e.rig.Wait(t, controller.RequestID(c))
			ok := st.State == controller.RequestCancelled && st.By == controller.RequestID(a.RequestID) ||
				st.State == controller.RequestDone
			if !ok {
				t.Fatalf("request %d said it cancelled %d, which ended %s by %d", a.RequestID, c, st.State, st.By)
			}
		}
		for _, r := range a.Replaced {
			if st := e.rig.Wait(t, controller.RequestID(r)); st.State != controller.RequestReplaced || st.By != controller.RequestID(a.RequestID) {
				t.Fatalf("request %d said it replaced %d, which ended %s by %d", a.RequestID, r, st.State, st.By)
			}
		}
	}
}

// A tune that arrives while another waits replaces it; one that arrives while another runs
// cancels it; the answers say which.
func TestTuneCancelsAndReplaces(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.rig.Loop.Radio.SetFrequency(f80)
	first := e.accepted(e.do("POST", "/api/v1/tune", ""+hzBody(f80)), "first")
	w := e.do("POST", "/api/v1/tune", hzBody(f80))
	second := e.accepted(w, "second")
	if m := object(t, w); str(m["replaced"]) != fmt.Sprintf("[%d]", first) || m["state"] != "queued" {
		t.Fatalf("the second tune, while the first waits: %s", w.Body.String())
	}
	var third controller.RequestID
	var reply string
	e.rig.Loop.Sensor.OnRead(fakeservice.Until(func() bool {
		if sn := e.rig.Service.Snapshot(); sn.Request != second || sn.State != tune.Refining {
			return false
		}
		w := e.do("POST", "/api/v1/tune", "")
		reply = w.Body.String()
		if w.Code == http.StatusAccepted {
			third = e.accepted(w, "third")
		}
		return true
	}))
	e.start()
	if st := e.rig.Wait(t, second); st.State != controller.RequestCancelled || third == 0 || st.By != third {
		t.Fatalf("the second tune: %s by %d; the third's answer %s", st.State, st.By, reply)
	}
	m := decodeMap(t, []byte(reply))
	if str(m["cancelled"]) != fmt.Sprintf("[%d]", second) || str(m["frequency_hz"]) != "3750000" {
		t.Fatalf("the third tune (no hz: the running tune's frequency, the radio having reported none): %s", reply)
	}
	if st := e.rig.Wait(t, third); st.Result.Outcome != tune.Tuned {
		t.Fatalf("the third tune: %+v", st.Result)
	}
}

// Goto, reference, calibrate, reset and home, each through its route, and refused where the
// loop cannot do it.
func TestOperatorRequests(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.start()
	lo, hi := e.rig.Service.SoftLimits()
	apiErr(t, e.do("POST", "/api/v1/goto", fmt.Sprintf(`{"step": %d}`, hi+1)), http.StatusUnprocessableEntity, "step", "goto beyond the soft limits")
	apiErr(t, e.do("POST", "/api/v1/goto", fmt.Sprintf(`{"step": %d}`, lo-1)), http.StatusUnprocessableEntity, "step", "goto below the soft limits")
	apiErr(t, e.do("POST", "/api/v1/reference", fmt.Sprintf(`{"step": %d}`, hi+1)), http.StatusUnprocessableEntity, "step", "reference beyond the soft limits")
	apiErr(t, e.do("POST", "/api/v1/home", ""), http.StatusConflict, "", "home without a home switch")
	apiErr(t, e.do("POST", "/api/v1/tune", ""), http.StatusUnprocessableEntity, "hz", "tune with no frequency known")
	apiErr(t, e.do("POST", "/api/v1/calibrate-backlash", "{}"), http.StatusUnprocessableEntity, "hz", "calibrate with no frequency known")

	id := e.accepted(e.do("POST", "/api/v1/goto", `{"step": 30000}`), "goto")
	if st := e.rig.Wait(t, id); st.Result.Outcome != tune.Positioned || e.rig.Axis.Position() != 30000 {
		t.Fatalf("goto: %+v at %d", st.Result, e.rig.Axis.Position())
	}
	id = e.accepted(e.do("POST", "/api/v1/reference", `{"step": 31000}`), "reference")
	if st := e.rig.Wait(t, id); st.Result.Outcome != tune.Referenced || e.rig.Axis.Position() != 31000 {
		t.Fatalf("reference: %+v at %d", st.Result, e.rig.Axis.Position())
	}
	e.rig.Loop.Radio.SetFrequency(f80)
	id = e.accepted(e.do("POST", "/api/v1/calibrate-backlash", hzBody(f80)), "calibrate")
	if st := e.rig.Wait(t, id); st.Result.Outcome != tune.Calibrated {
		t.Fatalf("calibrate: %+v", st.Result)
	}
	w := e.do("GET", idPath(id), "")
	if res := object(t, w)["result"].(map[string]any); res["backlash_steps"] == nil || res["fit"] == nil {
		t.Fatalf("the calibration's result: %s", w.Body.String())
	}
	id = e.accepted(e.do("POST", "/api/v1/reset", ""), "reset")
	if st := e.rig.Wait(t, id); st.Result.Outcome != tune.Reset {
		t.Fatalf("reset: %+v", st.Result)
	}

	lost := newEnv(t, fakeservice.Options{Untrusted: true}, Options{})
	lost.start()
	apiErr(t, lost.do("POST", "/api/v1/goto", `{"step": 30000}`), http.StatusConflict, "step", "goto with the position not trusted")
	if sn := lost.rig.Service.Snapshot(); sn.LastRequest != 0 || len(sn.Queue) != 0 {
		t.Fatalf("a refused goto was submitted: %+v", sn.Queue)
	}
}

// Bad bodies, bad parameters, wrong methods and unknown routes: each answered in JSON, with
// the field named where there is one.
func TestBadInput(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	huge := `{"hz": 3750000` + strings.Repeat(" ", maxJSONBody) + `}`
	for _, c := range []struct {
		method, path, body string
		ctype              string
		code               int
		field              string
	}{
		{"POST", "/api/v1/frequency", `{"hz": "3750000"}`, "", 400, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": true}`, "", 400, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": [1]}`, "", 400, "hz"},
		{"POST", "/api/v1/frequency", `{}`, "", 422, "hz"},
		{"POST", "/api/v1/frequency", ``, "", 422, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": null}`, "", 422, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": -3750000}`, "", 422, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": 0}`, "", 422, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": 1e30}`, "", 422, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": 1e999}`, "", 422, "hz"},
		{"POST", "/api/v1/frequency", `{"hz": 3750000, "mode": "cw"}`, "", 400, "mode"},
		{"POST", "/api/v1/frequency", `{"Hz": 3750000}`, "", 400, "Hz"},
		{"POST", "/api/v1/frequency", `{"hz": 3750000`, "", 400, ""},
		{"POST", "/api/v1/frequency", `{"hz": 3750000} {}`, "", 400, ""},
		{"POST", "/api/v1/frequency", `[3750000]`, "", 400, ""},
		{"POST", "/api/v1/frequency", `"3750000"`, "", 400, ""},
		{"POST", "/api/v1/frequency", huge, "", 413, "body"},
		{"POST", "/api/v1/frequency", `hz=3750000`, "application/x-www-form-urlencoded", 415, "Content-Type"},
		{"POST", "/api/v1/frequency", `{"hz": 3750000}`, "application/json; charset", 415, "Content-Type"},
		{"POST", "/api/v1/tune", `{"hz": "now"}`, "", 400, "hz"},
		{"POST", "/api/v1/tune", `{"freq": 3750000}`, "", 400, "freq"},
		{"POST", "/api/v1/calibrate-backlash", `{"hz": -1}`, "", 422, "hz"},
		{"POST", "/api/v1/goto", `{}`, "", 422, "step"},
		{"POST", "/api/v1/goto", `{"step": 30000.5}`, "", 422, "step"},
		{"POST", "/api/v1/goto", `{"step": 3e4}`, "", 422, "step"},
		{"POST", "/api/v1/goto", `{"step": "30000"}`, "", 400, "step"},
		{"POST", "/api/v1/goto", `{"step": 99999999999999999999}`, "", 422, "step"},
		{"POST", "/api/v1/goto", `{"step": 30000, "speed": 5}`, "", 400, "speed"},
		{"POST", "/api/v1/reference", `{"steps": 30000}`, "", 400, "steps"},
		{"POST", "/api/v1/reference", `{"step": false}`, "", 400, "step"},
		{"POST", "/api/v1/stop", `{"now": true}`, "", 400, "now"},
		{"POST", "/api/v1/reset", `[]`, "", 400, ""},
		{"POST", "/api/v1/home", `{"fast": true}`, "", 400, "fast"},
		{"GET", "/api/v1/requests/0", ``, "", 400, "id"},
		{"GET", "/api/v1/requests/-1", ``, "", 400, "id"},
		{"GET", "/api/v1/requests/abc", ``, "", 400, "id"},
		{"GET", "/api/v1/requests/99", ``, "", 404, "id"},
		{"GET", "/api/v1/requests/1?wait=soon", ``, "", 400, "wait"},
		{"GET", "/api/v1/requests/1?wait=1h", ``, "", 422, "wait"},
		{"GET", "/api/v1/requests/1?wait=-1s", ``, "", 422, "wait"},
		{"GET", "/api/v1/memory?format=xml", ``, "", 400, "format"},
		{"DELETE", "/api/v1/memory/abc", ``, "", 400, "hz"},
		{"DELETE", "/api/v1/memory/1e6", ``, "", 400, "hz"},
		{"DELETE", "/api/v1/memory/0", ``, "", 422, "hz"},
		{"DELETE", "/api/v1/memory/3750000.", ``, "", 400, "hz"},
		{"GET", "/api/v1/sweeps/.hidden", ``, "", 400, "id"},
		{"GET", "/api/v1/sweeps/" + strings.Repeat("x", 129), ``, "", 400, "id"},
		{"GET", "/api/v1/events?since=x", ``, "", 400, "since"},
		{"GET", "/api/v1/nothing", ``, "", 404, ""},
		{"GET", "/api/v2/status", ``, "", 404, ""},
	} {
		t.Run(c.method+" "+c.path+" "+clipString(c.body), func(t *testing.T) {
			r := httptestRequest(c.method, c.path, c.body, c.ctype)
			w := serve(e.a, r)
			apiErr(t, w, c.code, c.field, c.method+" "+c.path)
		})
	}
	r := httptestRequest("GET", "/api/v1/events", "", "")
	r.Header.Set("Last-Event-ID", "x")
	apiErr(t, serve(e.a, r), 400, "Last-Event-ID", "a bad Last-Event-ID")
	// Nothing of it reached the service.
	if sn := e.rig.Service.Snapshot(); sn.LastRequest != 0 || len(sn.Queue) != 0 {
		t.Fatalf("bad input submitted requests: %+v", sn.Queue)
	}
}

// A wrong method is 405 in JSON, with Allow.
func TestWrongMethod(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	for _, c := range []struct{ method, path, allow string }{
		{"POST", "/api/v1/status", "GET, HEAD"},
		{"GET", "/api/v1/tune", "POST"},
		{"DELETE", "/api/v1/stop", "POST"},
		{"POST", "/api/v1/memory", "GET, PUT, HEAD"},
		{"GET", "/api/v1/memory/3750000", "DELETE"},
		{"PUT", "/api/v1/requests/1", "GET, HEAD"},
		{"POST", "/healthz", "GET, HEAD"},
	} {
		w := e.do(c.method, c.path, "")
		apiErr(t, w, http.StatusMethodNotAllowed, "", c.method+" "+c.path)
		if got := w.Header().Get("Allow"); got != c.allow {
			t.Errorf("%s %s: Allow %q, want %q", c.method, c.path, got, c.allow)
		}
	}
}

// With a token, every write needs it and reads do not; without one, writes are open.
func TestBearerToken(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{Token: "s3cret-t0ken"})
	e.start()
	writes := []struct{ method, path, body string }{
		{"POST", "/api/v1/frequency", hzBody(f80)}, {"POST", "/api/v1/tune", hzBody(f80)}, {"POST", "/api/v1/stop", ""},
		{"POST", "/api/v1/home", ""}, {"POST", "/api/v1/goto", `{"step": 30000}`}, {"POST", "/api/v1/reference", `{"step": 30000}`},
		{"POST", "/api/v1/calibrate-backlash", ""}, {"POST", "/api/v1/reset", ""},
		{"PUT", "/api/v1/memory", `{"points": []}`}, {"DELETE", "/api/v1/memory/3750000", ""},
	}
	for _, c := range writes {
		for _, auth := range []string{"", "Bearer wrong", "Bearer s3cret-t0ke", "Bearer s3cret-t0ken-and-more", "Basic czNjcmV0LXQwa2Vu", "s3cret-t0ken", "Bearer"} {
			w := e.do(c.method, c.path, c.body, "Authorization", auth)
			apiErr(t, w, http.StatusUnauthorized, "Authorization", fmt.Sprintf("%s %s with %q", c.method, c.path, auth))
			if w.Header().Get("WWW-Authenticate") == "" {
				t.Fatalf("%s %s: 401 without WWW-Authenticate", c.method, c.path)
			}
		}
	}
	if sn := e.rig.Service.Snapshot(); sn.LastRequest != 0 || sn.MapPoints != 0 {
		t.Fatalf("unauthorised writes got through: %+v", sn)
	}
	for _, path := range []string{"/api/v1/status", "/api/v1/memory", "/api/v1/sweeps", "/api/v1/openapi.json", "/healthz"} {
		expect(t, e.do("GET", path, ""), http.StatusOK, "read "+path)
	}
	e.accepted(e.do("POST", "/api/v1/stop", "", "Authorization", "Bearer s3cret-t0ken"), "stop with the token")
	e.accepted(e.do("POST", "/api/v1/stop", "", "Authorization", "bearer s3cret-t0ken"), "stop with the scheme in lower case")
	if _, err := New(Options{Service: e.rig.Service, Token: " padded "}); err == nil {
		t.Fatal("a token with white space accepted")
	}
	if _, err := New(Options{}); err == nil {
		t.Fatal("an API without a service")
	}
}

// A request's wait is bounded: a request that cannot finish (the service is not running) is
// answered as it stands once the wait is over.
func TestRequestWaitIsBounded(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	id := e.accepted(e.do("POST", "/api/v1/goto", `{"step": 30000}`), "goto")
	w := e.do("GET", idPath(id)+"?wait=1ms", "")
	expect(t, w, http.StatusOK, "a bounded wait")
	if m := object(t, w); m["state"] != "queued" || m["final"] != false || m["result"] != nil || str(m["step"]) != "30000" {
		t.Fatalf("the waiting request: %s", w.Body.String())
	}
	e.start()
	w = e.do("GET", idPath(id)+"?wait=20", "")
	if m := object(t, w); m["state"] != "done" || m["started"] == nil || m["finished"] == nil {
		t.Fatalf("the request after the service ran it: %s", w.Body.String())
	}
}

// A panic in a handler is a 500, logged, and the server goes on.
func TestPanicIsRecovered(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{Sweeps: panicking{}})
	apiErr(t, e.do("GET", "/api/v1/sweeps", ""), http.StatusInternalServerError, "", "a panicking store")
	expect(t, e.do("GET", "/api/v1/status", ""), http.StatusOK, "status after the panic")
}

type panicking struct{}

func (panicking) List() ([]Sweep, error) { panic("injected: a bug in the store") }

func (panicking) Open(string) (Sweep, io.ReadCloser, error) { return Sweep{}, nil, ErrSweepNotFound }

// /healthz is up while the process is; /readyz follows Ready and the service.
func TestHealthAndReadiness(t *testing.T) {
	var notReady error
	e := newEnv(t, fakeservice.Options{}, Options{Ready: func() error { return notReady }})
	stop := e.start()
	w := e.do("GET", "/healthz", "")
	if expect(t, w, 200, "healthz"); w.Body.String() != "ok\n" {
		t.Fatalf("healthz: %q", w.Body.String())
	}
	expect(t, e.do("GET", "/readyz", ""), 200, "ready")
	notReady = errors.New("the coupler does not answer")
	w = e.do("GET", "/readyz", "")
	if expect(t, w, 503, "not ready"); !strings.Contains(w.Body.String(), "the coupler does not answer") {
		t.Fatalf("readyz: %q, want the reason", w.Body.String())
	}
	notReady = nil
	stop()
	w = e.do("GET", "/readyz", "")
	if expect(t, w, 503, "stopped"); !strings.Contains(w.Body.String(), "stopped") {
		t.Fatalf("readyz after the service stopped: %q", w.Body.String())
	}
	apiErr(t, e.do("POST", "/api/v1/stop", ""), http.StatusServiceUnavailable, "", "stop after the service stopped")
	expect(t, e.do("GET", "/healthz", ""), 200, "healthz after the service stopped")
}

// The status before anything happened, and the radio link going stale.
func TestStatusLink(t *testing.T) {
	e := newEnv(t, fakeservice.Options{Follower: &controller.FollowOptions{Manual: true, StaleAfter: 10 * time.Second}}, Options{})
	e.start()
	s := object(t, e.do("GET", "/api/v1/status", ""))
	for k, want := range map[string]string{"link": linkNone, "outcome": "null", "busy": "false", "state": "idle", "swr": "null",
		"request_id": "null", "frequency_hz": "null", "queue": "[]", "notices": "[]"} {
		if got := str(s[k]); got != want {
			t.Errorf("fresh status %s = %s, want %s", k, got, want)
		}
	}
	e.rig.Follower.Alive(controller.SourceRadio)
	if s := object(t, e.do("GET", "/api/v1/status", "")); s["link"] != linkHeard {
		t.Errorf("link after the radio was heard: %v", s["link"])
	}
	e.rig.Loop.Clock.Advance(11 * time.Second) // past the 10 s the follower allows
	e.rig.Follower.Poll()
	s = object(t, e.do("GET", "/api/v1/status", ""))
	if radio := s["radio"].(map[string]any); s["link"] != linkStale || radio["stale"] != true || str(radio["age_s"]) != "11" {
		t.Errorf("link after 11 s of silence: %v, radio %v", s["link"], radio)
	}
}

// httptestRequest builds a request with a body and, if given, a Content-Type (else JSON when
// there is a body).
func httptestRequest(method, path, body, ctype string) *http.Request {
	r := httptest.NewRequest(method, path, strings.NewReader(body))
	switch {
	case ctype != "":
		r.Header.Set("Content-Type", ctype)
	case body != "":
		r.Header.Set("Content-Type", "application/json")
	}
	return r
}

func serve(h http.Handler, r *http.Request) *httptest.ResponseRecorder {
	w := httptest.NewRecorder()
	h.ServeHTTP(w, r)
	return w
}

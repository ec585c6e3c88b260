package api

import (
	"bytes"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
)

// Frequencies the tests use: on 80, 160 and 40 m, where the fake loop tunes.
var (
	f80  = 3750 * physic.KiloHertz
	f80b = 3700 * physic.KiloHertz
	f160 = 1850 * physic.KiloHertz
)

// env is an API on a real service over the fake loop.
type env struct {
	t   *testing.T
	rig *fakeservice.Rig
	a   *API
}

// newEnv builds the rig and the API (o.Service and, if the rig has one, o.Follower are filled
// in). The service is not started: call start.
func newEnv(t *testing.T, fo fakeservice.Options, o Options) *env {
	t.Helper()
	rig := fakeservice.New(t, fo)
	o.Service = rig.Service
	if o.Follower == nil {
		o.Follower = rig.Follower
	}
	if o.Clock == nil {
		o.Clock = rig.Loop.Clock
	}
	a, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(a.Close)
	return &env{t: t, rig: rig, a: a}
}

func (e *env) start() func() { e.t.Helper(); return e.rig.Start(e.t) }

// do serves one request; headers come in pairs (name, value). A JSON body gets its
// Content-Type unless a header says otherwise.
func (e *env) do(method, path, body string, headers ...string) *httptest.ResponseRecorder {
	e.t.Helper()
	r := httptest.NewRequest(method, path, strings.NewReader(body))
	if body != "" {
		r.Header.Set("Content-Type", "application/json")
	}
	for i := 0; i+1 < len(headers); i += 2 {
		r.Header.Set(headers[i], headers[i+1])
	}
	w := httptest.NewRecorder()
	e.a.ServeHTTP(w, r)
	return w
}

// expect checks the status code of a reply.
func expect(t *testing.T, w *httptest.ResponseRecorder, code int, what string) {
	t.Helper()
	if w.Code != code {
		t.Fatalf("%s: status %d, want %d; body %s", what, w.Code, code, w.Body.String())
	}
}

// object decodes a JSON reply into a map, numbers as json.Number.
func object(t *testing.T, w *httptest.ResponseRecorder) map[string]any {
	t.Helper()
	if ct := w.Header().Get("Content-Type"); ct != "application/json" {
		t.Fatalf("Content-Type %q, want application/json; body %s", ct, w.Body.String())
	}
	return decodeMap(t, w.Body.Bytes())
}

func decodeMap(t *testing.T, b []byte) map[string]any {
	t.Helper()
	d := json.NewDecoder(bytes.NewReader(b))
	d.UseNumber()
	var m map[string]any
	if err := d.Decode(&m); err != nil {
		t.Fatalf("decode %s: %v", b, err)
	}
	return m
}

// apiErr decodes an error reply with its status code.
func apiErr(t *testing.T, w *httptest.ResponseRecorder, code int, field string, what string) apiError {
	t.Helper()
	expect(t, w, code, what)
	var ae apiError
	if ct := w.Header().Get("Content-Type"); ct != "application/json" {
		t.Fatalf("%s: error with Content-Type %q: %s", what, ct, w.Body.String())
	}
	if err := json.Unmarshal(w.Body.Bytes(), &ae); err != nil || ae.Message == "" {
		t.Fatalf("%s: error body %s (%v)", what, w.Body.String(), err)
	}
	if ae.Field != field {
		t.Fatalf("%s: error names field %q, want %q: %s", what, ae.Field, field, w.Body.String())
	}
	return ae
}

// accepted checks a 202 and returns the request ID.
func (e *env) accepted(w *httptest.ResponseRecorder, what string) controller.RequestID {
	e.t.Helper()
	expect(e.t, w, http.StatusAccepted, what)
	var a acceptedJSON
	if err := json.Unmarshal(w.Body.Bytes(), &a); err != nil || a.RequestID == 0 || a.State == "" {
		e.t.Fatalf("%s: %s (%v)", what, w.Body.String(), err)
	}
	return controller.RequestID(a.RequestID)
}

func hzBody(f physic.Frequency) string { return `{"hz": ` + string(hz(f)) + `}` }

func idPath(id controller.RequestID) string {
	return "/api/v1/requests/" + strconv.FormatUint(uint64(id), 10)
}

func str(v any) string {
	switch x := v.(type) {
	case nil:
		return "null"
	case string:
		return x
	case json.Number:
		return x.String()
	}
	b, _ := json.Marshal(v)
	return string(b)
}

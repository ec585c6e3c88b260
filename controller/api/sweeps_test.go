package api

import (
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/tune"
)

// A recording in controller/record's format (version 1), as the store would hold it.
const recording = `tankd-sweep 1
@ start=2026-01-01T12:00:00Z
t_s step dir freq_hz fwd_w ref_w swr
0.001000 18500 + 3600000 5.0000 0.5000 1.9
`

// memStore is a SweepStore in memory.
type memStore map[string]Sweep

func (m memStore) List() ([]Sweep, error) {
	var out []Sweep
	for _, s := range m {
		out = append(out, s)
	}
	return out, nil
}

func (m memStore) Open(id string) (Sweep, io.ReadCloser, error) {
	s, ok := m[id]
	if !ok {
		return Sweep{}, nil, ErrSweepNotFound
	}
	return s, io.NopCloser(strings.NewReader(recording)), nil
}

func TestSweeps(t *testing.T) {
	none := newEnv(t, fakeservice.Options{}, Options{})
	w := none.do("GET", "/api/v1/sweeps", "")
	if expect(t, w, http.StatusOK, "no store"); strings.TrimSpace(w.Body.String()) != `{"sweeps":[]}` {
		t.Fatalf("sweeps without a store: %s", w.Body.String())
	}
	apiErr(t, none.do("GET", "/api/v1/sweeps/anything", ""), http.StatusNotFound, "id", "a sweep without a store")

	t0 := time.Date(2026, time.January, 1, 12, 0, 0, 0, time.UTC)
	store := memStore{
		"old": {ID: "old", Time: t0, Kind: controller.Tune, Freq: f160, Outcome: tune.Tuned, Request: 3, Samples: 40, Bytes: 1800},
		"new": {ID: "new", Time: t0.Add(time.Hour), Freq: f80, Samples: 1, Bytes: int64(len(recording))},
	}
	e := newEnv(t, fakeservice.Options{}, Options{Sweeps: store})
	w = e.do("GET", "/api/v1/sweeps", "")
	expect(t, w, http.StatusOK, "list")
	list := object(t, w)["sweeps"].([]any)
	if len(list) != 2 {
		t.Fatalf("list: %s", w.Body.String())
	}
	first, second := list[0].(map[string]any), list[1].(map[string]any)
	if first["id"] != "new" || first["outcome"] != nil || first["kind"] != nil || first["request_id"] != nil || str(first["frequency_hz"]) != "3750000" {
		t.Fatalf("the newest first: %v", first)
	}
	if second["id"] != "old" || second["outcome"] != "tuned" || second["kind"] != "tune" || str(second["request_id"]) != "3" ||
		str(second["samples"]) != "40" || str(second["bytes"]) != "1800" || str(second["time"]) != "2026-01-01T12:00:00Z" {
		t.Fatalf("the older: %v", second)
	}
	w = e.do("GET", "/api/v1/sweeps/new", "")
	expect(t, w, http.StatusOK, "a recording")
	if w.Body.String() != recording || !strings.HasPrefix(w.Header().Get("Content-Type"), "text/plain") {
		t.Fatalf("the recording: %q as %s", w.Body.String(), w.Header().Get("Content-Type"))
	}
	apiErr(t, e.do("GET", "/api/v1/sweeps/missing", ""), http.StatusNotFound, "id", "a recording not kept")
}

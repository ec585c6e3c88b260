package api

import (
	"encoding/json"
	"errors"
	"io"
	"io/fs"
	"net/http"
	"slices"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/tune"
)

// SweepStore is where the daemon keeps its sweep recordings (controller/record's format), as
// the API reads them. Its methods may be called from any goroutine, concurrently.
type SweepStore interface {
	// List returns what the store holds, in any order (the API sorts newest first).
	List() ([]Sweep, error)
	// Open returns a recording's metadata and its content, which the caller closes. An ID the
	// store does not hold, or that cannot name a recording at all, is an error wrapping
	// ErrSweepNotFound (or fs.ErrNotExist); any other error is the store failing (a 500).
	Open(id string) (Sweep, io.ReadCloser, error)
}

// ErrSweepNotFound: the store holds no recording of that ID.
var ErrSweepNotFound = errors.New("sweep not found")

// Sweep describes one recording.
type Sweep struct {
	// ID names the recording in the API: 1 to 128 of the characters A–Z a–z 0–9 . _ - (and
	// not starting with a dot).
	ID      string
	Time    time.Time       // when the sweep started
	Kind    controller.Kind // of the request the sweep belonged to (tune, calibrate…); "" if unknown
	Freq    physic.Frequency
	Outcome tune.Outcome         // of the operation the sweep belonged to; "" if unknown
	Request controller.RequestID // the request it belonged to; 0 if unknown
	Samples int                  // readings recorded
	Bytes   int64                // the recording's size
}

type sweepJSON struct {
	ID          string       `json:"id"`
	Time        time.Time    `json:"time"`
	Kind        *string      `json:"kind"`
	FrequencyHz *json.Number `json:"frequency_hz"`
	Outcome     *string      `json:"outcome"`
	RequestID   *uint64      `json:"request_id"`
	Samples     int          `json:"samples"`
	Bytes       int64        `json:"bytes"`
}

// validSweepID says whether id may name a recording: a plain file name, never a path.
func validSweepID(id string) bool {
	if id == "" || len(id) > 128 || id[0] == '.' {
		return false
	}
	for i := range len(id) {
		c := id[i]
		if !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '.' || c == '_' || c == '-') {
			return false
		}
	}
	return true
}

// sweeps is GET /api/v1/sweeps: the recordings, newest first.
func (a *API) sweeps(w http.ResponseWriter, r *http.Request) error {
	var list []Sweep
	if a.o.Sweeps != nil {
		var err error
		if list, err = a.o.Sweeps.List(); err != nil {
			return err
		}
	}
	slices.SortStableFunc(list, func(x, y Sweep) int { return y.Time.Compare(x.Time) })
	out := make([]sweepJSON, len(list))
	for i, s := range list {
		out[i] = sweepJSON{ID: s.ID, Time: s.Time, Kind: orNil(string(s.Kind)), FrequencyHz: knownHz(s.Freq), Outcome: orNil(string(s.Outcome)),
			RequestID: idOrNil(s.Request), Samples: s.Samples, Bytes: s.Bytes}
	}
	writeJSON(w, http.StatusOK, map[string]any{"sweeps": out})
	return nil
}

// sweep is GET /api/v1/sweeps/{id}: the recording itself, as text.
func (a *API) sweep(w http.ResponseWriter, r *http.Request) error {
	id := r.PathValue("id")
	if !validSweepID(id) {
		return badRequest("id", "%q: want 1 to 128 of A–Z a–z 0–9 . _ -, not starting with a dot", clipString(id))
	}
	notFound := &apiError{Status: http.StatusNotFound, Field: "id", Message: "no sweep recording " + id}
	if a.o.Sweeps == nil {
		return notFound
	}
	_, rc, err := a.o.Sweeps.Open(id)
	switch {
	case errors.Is(err, ErrSweepNotFound) || errors.Is(err, fs.ErrNotExist):
		return notFound
	case err != nil:
		return err
	}
	defer rc.Close()
	w.Header().Set("Content-Type", "text/plain; charset=utf-8")
	w.Header().Set("Content-Disposition", `inline; filename="`+id+`.sweep"`)
	w.WriteHeader(http.StatusOK)
	if _, err := io.Copy(w, rc); err != nil {
		a.log.Warn("sweep recording not sent whole", "id", id, "err", err) // the status line has gone
	}
	return nil
}

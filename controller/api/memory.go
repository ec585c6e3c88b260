package api

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net/http"
	"path/filepath"
	"strconv"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/memmap"
)

// forgetTolerance is how far from the frequency given a point may lie and still be the one a
// DELETE means: 1 Hz, the resolution a radio reports its frequency in (common practice), while
// the map keeps microhertz.
const forgetTolerance = physic.Hertz

// memory is GET /api/v1/memory[?format=csv].
func (a *API) memory(w http.ResponseWriter, r *http.Request) error {
	switch f := r.URL.Query().Get("format"); f {
	case "", "json":
		writeJSON(w, http.StatusOK, pointsOf(a.s.MapPoints()))
	case "csv":
		w.Header().Set("Content-Type", "text/csv; charset=utf-8")
		w.Header().Set("Content-Disposition", `attachment; filename="loop-map.csv"`)
		w.Header().Set("Cache-Control", "no-store")
		if err := a.s.ExportMap(w); err != nil {
			a.log.Error("memory map export", "err", err) // the status line has gone already
		}
	default:
		return badRequest("format", "%q: want json or csv", clipString(f))
	}
	return nil
}

// importJSON answers a memory map import.
type importJSON struct {
	Imported int `json:"imported"`
	Before   int `json:"before"`
	After    int `json:"after"`
	// Aside is the file name, in the state directory, the previous map was kept in; null
	// without a state directory.
	Aside *string `json:"aside"`
}

// importMemory is PUT /api/v1/memory: the map's points replaced, as CSV (text/csv) or JSON
// (application/json), applied between operations; every bad row is named and nothing changes
// then.
func (a *API) importMemory(w http.ResponseWriter, r *http.Request) error {
	mt, err := mediaType(r)
	if err != nil {
		return err
	}
	if mt != "text/csv" && mt != "application/json" {
		return &apiError{Status: http.StatusUnsupportedMediaType, Field: "Content-Type",
			Message: fmt.Sprintf("%q: want text/csv or application/json", clipString(mt))}
	}
	body, err := readBody(w, r, maxMapBody)
	if err != nil {
		return err
	}
	var pts []memmap.Point
	if mt == "text/csv" {
		if pts, err = memmap.ImportCSV(bytes.NewReader(body)); err != nil {
			return &apiError{Status: http.StatusUnprocessableEntity, Field: "body", Message: "bad CSV: nothing imported", Details: errorList(err)}
		}
	} else if pts, err = decodePoints(body); err != nil {
		return err
	}
	ctx, cancel := context.WithTimeout(r.Context(), editWait)
	defer cancel()
	res, err := a.s.ImportMap(ctx, pts)
	if err != nil {
		return a.editError(err, mt == "text/csv")
	}
	out := importJSON{Imported: len(pts), Before: res.Before, After: res.After}
	if res.Aside != "" {
		out.Aside = orNil(filepath.Base(res.Aside))
	}
	writeJSON(w, http.StatusOK, out)
	return nil
}

// editError turns the error of a map edit into the client's.
func (a *API) editError(err error, csv bool) error {
	var bad controller.PointsError
	switch {
	case errors.As(err, &bad):
		ae := &apiError{Status: http.StatusUnprocessableEntity, Message: "bad points: nothing imported"}
		for i, pe := range bad {
			name := fmt.Sprintf("points[%d]", pe.Index)
			if csv {
				name = "row " + strconv.Itoa(pe.Index+1)
			}
			if pe.Field != "" {
				if csv {
					name += " " + pe.Field
				} else {
					name += "." + pe.Field
				}
			}
			if i == 0 {
				ae.Field = name
			}
			if i == maxPointErrors {
				ae.Details = append(ae.Details, "too many bad points, stopped listing")
				break
			}
			ae.Details = append(ae.Details, name+": "+pe.Err.Error())
		}
		return ae
	case errors.Is(err, controller.ErrNoPoint):
		return &apiError{Status: http.StatusNotFound, Field: "hz", Message: err.Error()}
	case errors.Is(err, controller.ErrStopped):
		return &apiError{Status: http.StatusServiceUnavailable, Message: err.Error()}
	case errors.Is(err, context.DeadlineExceeded):
		return &apiError{Status: http.StatusServiceUnavailable, Message: "the loop stayed busy: the map is changed only between operations; nothing changed, try again"}
	case errors.Is(err, context.Canceled):
		return &apiError{Status: http.StatusServiceUnavailable, Message: "cancelled: nothing changed"}
	}
	return err
}

// forgetPoint is DELETE /api/v1/memory/{hz}: the point at hz (within 1 Hz) forgotten.
func (a *API) forgetPoint(w http.ResponseWriter, r *http.Request) error {
	f, err := parseHzPath(r.PathValue("hz"))
	if err != nil {
		return err
	}
	ctx, cancel := context.WithTimeout(r.Context(), editWait)
	defer cancel()
	p, err := a.s.ForgetPoint(ctx, f, forgetTolerance)
	if err != nil {
		return a.editError(err, false)
	}
	writeJSON(w, http.StatusOK, map[string]any{"forgotten": pointOf(p), "map_points": a.s.Snapshot().MapPoints})
	return nil
}

// errorList lists the errors joined in err (errors.Join), each on its own; err itself if it
// joins none.
func errorList(err error) []string {
	for e := err; e != nil; e = errors.Unwrap(e) {
		if j, ok := e.(interface{ Unwrap() []error }); ok {
			var out []string
			for _, x := range j.Unwrap() {
				out = append(out, x.Error())
			}
			return out
		}
	}
	return []string{err.Error()}
}

package api

import (
	"fmt"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/tankd/tankd/controller/internal/fakeservice"
	"github.com/tankd/tankd/controller/memmap"
)

// A small map of the fake loop as CSV, in memmap's export format: positions where its dips are
// (fakeloop's model: 240 000·(1 MHz/f)² + 30 + 20 steps).
const mapCSV = `frequency_hz,position,time,temperature_c,swr,q
1850000,70174,2025-12-31T09:00:00Z,,1.3,
3600000.5,18569,2025-12-31T10:00:00Z,12,,
7100000,4811,2025-12-31T11:00:00Z,,1.2,1000
`

// The memory map round trip: PUT as CSV, GET as JSON and CSV, PUT the JSON back over a changed
// map (the map before kept aside and readable), DELETE one point within 1 Hz, then not again.
func TestMemoryRoundTrip(t *testing.T) {
	state := t.TempDir()
	e := newEnv(t, fakeservice.Options{StateDir: state}, Options{})
	e.start()
	w := e.do("PUT", "/api/v1/memory", mapCSV, "Content-Type", "text/csv; charset=utf-8")
	expect(t, w, http.StatusOK, "import CSV")
	m := object(t, w)
	if str(m["imported"]) != "3" || str(m["before"]) != "0" || str(m["after"]) != "3" || !strings.HasPrefix(str(m["aside"]), "loop.map.before-import-") {
		t.Fatalf("import: %s", w.Body.String())
	}
	w = e.do("GET", "/api/v1/memory?format=csv", "")
	if expect(t, w, http.StatusOK, "export CSV"); w.Body.String() != mapCSV || !strings.HasPrefix(w.Header().Get("Content-Type"), "text/csv") {
		t.Fatalf("export: %q (%s), want what was imported:\n%s", w.Body.String(), w.Header().Get("Content-Type"), mapCSV)
	}
	w = e.do("GET", "/api/v1/memory", "")
	expect(t, w, http.StatusOK, "points as JSON")
	asJSON := w.Body.String()
	pts := object(t, w)["points"].([]any)
	if len(pts) != 3 {
		t.Fatalf("points: %s", asJSON)
	}
	if p := pts[1].(map[string]any); str(p["frequency_hz"]) != "3600000.5" || str(p["position"]) != "18569" ||
		str(p["temperature_c"]) != "12" || p["swr"] != nil || p["q"] != nil || str(p["time"]) != "2025-12-31T10:00:00Z" {
		t.Fatalf("the second point: %v", p)
	}

	// Change the map, then put the JSON back over it.
	del := e.do("DELETE", "/api/v1/memory/7100000.4", "")
	expect(t, del, http.StatusOK, "forget within 1 Hz")
	if f := object(t, del); str(f["map_points"]) != "2" || str(f["forgotten"].(map[string]any)["position"]) != "4811" {
		t.Fatalf("forget: %s", del.Body.String())
	}
	apiErr(t, e.do("DELETE", "/api/v1/memory/7100000", ""), http.StatusNotFound, "hz", "forget it again")
	apiErr(t, e.do("DELETE", "/api/v1/memory/1850002", ""), http.StatusNotFound, "hz", "forget 2 Hz off")

	body := strings.Replace(asJSON, `"count":3,`, "", 1) // what GET gives, less its count
	w = e.do("PUT", "/api/v1/memory", body)
	expect(t, w, http.StatusOK, "import JSON")
	m = object(t, w)
	if str(m["before"]) != "2" || str(m["after"]) != "3" {
		t.Fatalf("import JSON: %s", w.Body.String())
	}
	aside := filepath.Join(state, str(m["aside"]))
	old, err := memmap.Load(aside, memmap.Options{})
	if err != nil || old.Len() != 2 || slices.ContainsFunc(old.Points(), func(p memmap.Point) bool { return p.Pos == 4811 }) {
		t.Fatalf("the map kept aside in %s: %v, %v; want the two points left after the delete", aside, old, err)
	}
	w = e.do("GET", "/api/v1/memory?format=csv", "")
	if w.Body.String() != mapCSV {
		t.Fatalf("after the JSON round trip: %q", w.Body.String())
	}
	saved, err := memmap.Load(filepath.Join(state, "loop.map"), memmap.Options{})
	if err != nil || saved.Len() != 3 {
		t.Fatalf("the map saved: %v, %v", saved, err)
	}
	files, _ := os.ReadDir(state)
	var asides int
	for _, f := range files {
		if strings.Contains(f.Name(), ".before-import-") && !strings.Contains(f.Name(), ".tmp-") {
			asides++
		}
	}
	if asides != 2 {
		t.Fatalf("%d copies kept aside in %v, want one per import", asides, files)
	}
	if s := object(t, e.do("GET", "/api/v1/status", "")); str(s["map_points"]) != "3" {
		t.Fatalf("status map_points %v", s["map_points"])
	}
}

// Bad imports: every bad row named, nothing changed.
func TestMemoryImportRefused(t *testing.T) {
	e := newEnv(t, fakeservice.Options{}, Options{})
	e.start()
	expect(t, e.do("PUT", "/api/v1/memory", mapCSV, "Content-Type", "text/csv"), http.StatusOK, "a good import")
	badCSV := "frequency_hz,position,time,temperature_c,swr,q\n" +
		"1850000,70174,,,,\n" +
		"abc,1,,,,\n" +
		"3600000,18569,yesterday,,,\n" +
		"7100000,4811,,,0.5,\n"
	ae := apiErr(t, e.do("PUT", "/api/v1/memory", badCSV, "Content-Type", "text/csv"), http.StatusUnprocessableEntity, "body", "bad CSV")
	if len(ae.Details) != 3 || !strings.Contains(ae.Details[0], "line 3") || !strings.Contains(ae.Details[2], "line 5") {
		t.Fatalf("bad CSV rows: %q, want lines 3, 4 and 5 named", ae.Details)
	}
	outside := "frequency_hz,position,time,temperature_c,swr,q\n1850000,90000,,,,\n3600000,18569,,,,\n7100000,1,,,,\n"
	ae = apiErr(t, e.do("PUT", "/api/v1/memory", outside, "Content-Type", "text/csv"), http.StatusUnprocessableEntity, "row 1 position", "positions outside the soft limits")
	if len(ae.Details) != 2 || !strings.HasPrefix(ae.Details[1], "row 3 position") {
		t.Fatalf("rows outside the soft limits: %q", ae.Details)
	}
	badJSON := `{"points": [
		{"frequency_hz": 1850000, "position": 70174},
		{"frequency_hz": "1850000", "position": 70174},
		{"position": 70174},
		{"frequency_hz": 3600000, "position": 18569, "colour": "red"},
		{"frequency_hz": 3600000, "position": 18569, "time": "noon"},
		{"frequency_hz": 3600000, "position": 18569, "temperature_c": -300},
		{"frequency_hz": 3600000, "position": 90000}
	]}`
	ae = apiErr(t, e.do("PUT", "/api/v1/memory", badJSON), http.StatusBadRequest, "points[1].frequency_hz", "bad JSON points")
	want := []string{"points[1].frequency_hz", "points[2].frequency_hz", "points[3].colour", "points[4].time", "points[5].temperature_c"}
	if len(ae.Details) != len(want) {
		t.Fatalf("bad JSON points: %q, want %v named", ae.Details, want)
	}
	for i, w := range want {
		if !strings.HasPrefix(ae.Details[i], w+":") {
			t.Fatalf("bad JSON point %d: %q, want it to name %s", i, ae.Details[i], w)
		}
	}
	apiErr(t, e.do("PUT", "/api/v1/memory", `{"points": [{"frequency_hz": 3600000, "position": 90000}]}`), http.StatusUnprocessableEntity, "points[0].position", "a JSON point outside the soft limits")
	apiErr(t, e.do("PUT", "/api/v1/memory", `{"points": {}}`), http.StatusBadRequest, "points", "points not a list")
	apiErr(t, e.do("PUT", "/api/v1/memory", `{}`), http.StatusUnprocessableEntity, "points", "no points")
	apiErr(t, e.do("PUT", "/api/v1/memory", mapCSV, "Content-Type", ""), http.StatusUnsupportedMediaType, "Content-Type", "no Content-Type")
	apiErr(t, e.do("PUT", "/api/v1/memory", mapCSV, "Content-Type", "text/plain"), http.StatusUnsupportedMediaType, "Content-Type", "text/plain")
	var big strings.Builder
	big.WriteString("frequency_hz,position,time,temperature_c,swr,q\n")
	for big.Len() <= maxMapBody {
		fmt.Fprintf(&big, "%d,30000,,,,\n", 1800000+big.Len())
	}
	apiErr(t, e.do("PUT", "/api/v1/memory", big.String(), "Content-Type", "text/csv"), http.StatusRequestEntityTooLarge, "body", "a map over 1 MiB")
	if w := e.do("GET", "/api/v1/memory?format=csv", ""); w.Body.String() != mapCSV {
		t.Fatalf("refused imports changed the map: %q", w.Body.String())
	}
}

package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func runOK(t *testing.T, args ...string) (string, string) {
	t.Helper()
	var out, errOut bytes.Buffer
	if code := run(args, &out, &errOut); code != 0 {
		t.Fatalf("tanksim %s: exit %d\n%s", strings.Join(args, " "), code, errOut.String())
	}
	return out.String(), errOut.String()
}

func TestCurvePlots(t *testing.T) {
	dir := t.TempDir()
	svg, png := filepath.Join(dir, "c.svg"), filepath.Join(dir, "c.png")
	runOK(t, "curve", "-x", "step", "-freq", "3750000", "-o", svg)
	runOK(t, "curve", "-x", "freq", "-freq", "1850000", "-o", png)
	if b, _ := os.ReadFile(svg); !bytes.Contains(b, []byte("<svg")) {
		t.Error("the step curve is not an SVG")
	}
	if b, _ := os.ReadFile(png); !bytes.HasPrefix(b, []byte("\x89PNG")) {
		t.Error("the frequency curve is not a PNG")
	}
	var out, errOut bytes.Buffer
	if code := run([]string{"curve", "-o", filepath.Join(dir, "c.txt")}, &out, &errOut); code != 2 {
		t.Errorf("a .txt plot: exit %d, want 2", code)
	}
}

func TestTuneShowsEveryStage(t *testing.T) {
	plot := filepath.Join(t.TempDir(), "tune.svg")
	out, _ := runOK(t, "tune", "-freq", "3750000", "-plot", plot)
	for _, want := range []string{"prediction (prior)", "pre-positioned", "scanning", "refining", "fit (rational", "approaching", "verifying", "outcome tuned"} {
		if !strings.Contains(out, want) {
			t.Errorf("tune output lacks %q:\n%s", want, out)
		}
	}
	if b, _ := os.ReadFile(plot); !bytes.Contains(b, []byte("fitted curve")) {
		t.Error("the plot has no fitted curve")
	}
	out, _ = runOK(t, "tune", "-freq", "1900000", "-map", "warm", "-history", "4")
	if !strings.Contains(out, "warm-up:") || !strings.Contains(out, "prediction (map)") {
		t.Errorf("a warm tune should predict from the map:\n%s", out)
	}
}

func TestBenchJSON(t *testing.T) {
	for _, m := range []string{"cold", "warm"} {
		out, _ := runOK(t, "bench", "-n", "4", "-map", m, "-json", "-q")
		var rep struct {
			Scenarios  int                               `json:"scenarios"`
			Strategies map[string]map[string]json.Number `json:"strategies"`
		}
		if err := json.Unmarshal([]byte(out), &rep); err != nil {
			t.Fatalf("%s: not JSON: %v\n%s", m, err, out)
		}
		if rep.Scenarios != 4 || len(rep.Strategies) != 3 {
			t.Fatalf("%s: %d scenarios, %d strategies", m, rep.Scenarios, len(rep.Strategies))
		}
		for name, s := range rep.Strategies {
			for _, key := range []string{"success_rate", "median_tune_s", "p95_tune_s", "median_rf_s", "median_swr_excess",
				"median_overhead_s", "preposition_hit_rate", "limit_violations", "stalls"} {
				if _, ok := s[key]; !ok {
					t.Errorf("%s %s: no %s", m, name, key)
				}
			}
		}
		if s := rep.Strategies["oracle"]["median_overhead_s"]; s.String() != "0" {
			t.Errorf("the oracle's overhead over itself is %s", s)
		}
	}
}

func TestBenchOwnStation(t *testing.T) {
	out, _ := runOK(t, "bench", "-n", "3", "-scenarios", "../../configs/stations/vacuum.toml", "-q", "-perturb=false")
	if !strings.Contains(out, "3 scenarios") || !strings.Contains(out, "tankd") {
		t.Errorf("bench of a station file:\n%s", out)
	}
	var o, e bytes.Buffer
	if code := run([]string{"bench", "-scenarios", "nonesuch.toml"}, &o, &e); code == 0 {
		t.Error("a missing scenarios file was accepted")
	}
}

func TestRecordThenReplay(t *testing.T) {
	path := filepath.Join(t.TempDir(), "s.sweep")
	runOK(t, "record", "-freq", "3800000", "-o", path)
	out, _ := runOK(t, "replay", path)
	if !strings.Contains(out, "outcome tuned") {
		t.Errorf("replay of a fresh recording:\n%s", out)
	}
	var o, e bytes.Buffer
	if code := run([]string{"replay"}, &o, &e); code != 2 {
		t.Errorf("replay with no file: exit %d, want 2", code)
	}
}

// TestBenchReportsPhasesCoverageAndStations: the JSON report carries the phases, the map's σ
// coverage, the figures by station and the drawn values besides the first keys, and the mean
// phases add up to the mean tune.
func TestBenchReportsPhasesCoverageAndStations(t *testing.T) {
	out, _ := runOK(t, "bench", "-n", "6", "-map", "warm", "-json", "-q")
	var rep struct {
		Ranges     string                        `json:"ranges"`
		Strategies map[string]map[string]float64 `json:"strategies"`
		Coverage   struct {
			All      map[string]float64            `json:"all"`
			BySource map[string]map[string]float64 `json:"by_source"`
			ByExtent map[string]map[string]float64 `json:"by_extent"`
		} `json:"coverage"`
		ByStation map[string]map[string]any `json:"by_station"`
		Drawn     []map[string]string       `json:"drawn"`
	}
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatalf("not JSON: %v\n%s", err, out)
	}
	if rep.Ranges != "standard" || len(rep.ByStation) == 0 || len(rep.Drawn) == 0 {
		t.Errorf("ranges %q, %d stations, %d drawn values", rep.Ranges, len(rep.ByStation), len(rep.Drawn))
	}
	if n := rep.Coverage.All["n"]; n != 6 {
		t.Errorf("coverage over %v tunes, want all 6 warm tunes (each starts from a prediction)", n)
	}
	for name, s := range rep.Strategies {
		sum := 0.0
		for _, p := range []string{"travel", "settle", "readings", "approach", "verify", "other"} {
			v, ok := s["mean_"+p+"_s"]
			if _, med := s["median_"+p+"_s"]; !ok || !med {
				t.Errorf("%s: no mean or median %s", name, p)
			}
			sum += v
		}
		if math.Abs(sum-s["mean_tune_s"]) > 1e-6 {
			t.Errorf("%s: the mean phases add up to %.6f s, the mean tune is %.6f s", name, sum, s["mean_tune_s"])
		}
	}
	table, _ := runOK(t, "bench", "-n", "6", "-q")
	for _, want := range []string{"where the time goes", "travel", "the map's σ", "within 2σ", "tankd by station"} {
		if !strings.Contains(table, want) {
			t.Errorf("the table lacks %q:\n%s", want, table)
		}
	}
}

// TestBenchStationFileDrawsOnlyWhatItLeavesOut: a station file that sets every simulator value
// the benchmark would draw is benched as it says, and the output says that nothing was drawn;
// one that leaves values out lists them with their ranges.
func TestBenchStationFileDrawsOnlyWhatItLeavesOut(t *testing.T) {
	dir := t.TempDir()
	full := filepath.Join(dir, "full.toml")
	if err := os.WriteFile(full, []byte(`
[drive]
backlash_steps = 25
[simulator.drive]
miss_rate = 0
[simulator.coupler]
directivity_db = 28
leak_phase_deg = 45
adc_noise_mv = 0.8
[simulator.weather]
swing_k = 4
wander_k = 0.5
peak_hour = 14
`), 0o644); err != nil {
		t.Fatal(err)
	}
	out, _ := runOK(t, "bench", "-n", "3", "-scenarios", full, "-perturb=false", "-q", "-bands", "160m,80m")
	if !strings.Contains(out, "full: nothing drawn") {
		t.Errorf("a full station file: the output does not say nothing was drawn:\n%s", out)
	}
	js, _ := runOK(t, "bench", "-n", "3", "-scenarios", full, "-perturb=false", "-q", "-bands", "160m,80m", "-json")
	var rep struct {
		Drawn []map[string]string `json:"drawn"`
	}
	if err := json.Unmarshal([]byte(js), &rep); err != nil || rep.Drawn == nil || len(rep.Drawn) != 0 {
		t.Errorf("a full station file: drawn %v (%v), want an empty list", rep.Drawn, err)
	}
	part := filepath.Join(dir, "part.toml")
	if err := os.WriteFile(part, []byte("[drive]\nbacklash_steps = 25\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	out, _ = runOK(t, "bench", "-n", "3", "-scenarios", part, "-perturb=false", "-q", "-bands", "160m,80m")
	if !strings.Contains(out, "simulator.coupler.directivity_db: 22–35 dB") || strings.Contains(out, "drive.backlash_steps:") {
		t.Errorf("a partial station file: the drawn values are not what it leaves out:\n%s", out)
	}
}

// TestBenchHarshRanges: the harsh ranges run, their own stations can be picked, and an unknown
// set of ranges is a usage error.
func TestBenchHarshRanges(t *testing.T) {
	out, _ := runOK(t, "bench", "-n", "4", "-ranges", "harsh", "-stations", "small-loop,vacuum-nohome", "-q")
	if !strings.Contains(out, "harsh ranges") || !strings.Contains(out, "small-loop") {
		t.Errorf("harsh ranges:\n%s", out)
	}
	var o, e bytes.Buffer
	if code := run([]string{"bench", "-ranges", "gentle"}, &o, &e); code != 2 {
		t.Errorf("-ranges gentle: exit %d, want 2", code)
	}
	if code := run([]string{"bench", "-stations", "small-loop"}, &o, &e); code != 2 {
		t.Errorf("a harsh station with the standard ranges: exit %d, want 2", code)
	}
}

package main

import (
	"bytes"
	"encoding/json"
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

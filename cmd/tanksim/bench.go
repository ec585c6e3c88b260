package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"sort"
	"strings"
	"text/tabwriter"

	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/bench"
)

// Ranges of the benchmark's flags: a hundred thousand scenarios take hours; a thousand workers
// is more CPUs than any one machine the benchmark runs on (both from memory).
var (
	scenariosRange = station.Range{Min: 1, Max: 100000}
	workersRange   = station.Range{Min: 1, Max: 1000, Zero: "one per CPU"}
)

func runBench(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("bench", stderr)
	nf := newNumFlags(fs)
	n := nf.Int("n", 200, scenariosRange, "number of `scenarios`")
	seed := nf.Seed("seed", 1, "`seed`: the same seed gives the same scenarios and results")
	mapState := fs.String("map", "cold", "memory map before the measured tune: cold (empty) or warm (calibrated and learned from earlier tunes)")
	asJSON := fs.Bool("json", false, "print the summary as JSON")
	scenarios := fs.String("scenarios", "", "station descriptions (TOML, comma-separated) to bench instead of the built-in presets")
	presets := fs.String("stations", "", "built-in presets to draw from, comma-separated (default all)")
	bands := fs.String("bands", "160m,80m,40m", "bands to draw frequencies from")
	perturb := fs.Bool("perturb", true, "let each simulated loop differ from its description (strays, size, capacitor range) as real ones do")
	workers := nf.Int("workers", 0, workersRange, "parallel `workers`")
	cases := fs.String("cases", "", "also write every scenario's outcome per strategy to this CSV file")
	quiet := fs.Bool("q", false, "no progress on standard error")
	fs.Usage = func() {
		fmt.Fprintln(stderr, `usage: tanksim bench [flags]

Runs seeded scenarios through the real controller against the simulator, on the virtual clock,
and the same scenarios through two references: an exhaustive fixed-step sweep and an oracle that
knows the best position. Times are virtual seconds.

flags:`)
		fs.PrintDefaults()
	}
	if err := nf.parse(args); err != nil {
		return err
	}
	m := bench.MapState(*mapState)
	if m != bench.Cold && m != bench.Warm {
		return usageError{fmt.Errorf("-map %q: want cold or warm", *mapState)}
	}
	o := bench.Options{N: *n, Seed: *seed, Map: m, Workers: *workers, Knobs: bench.DefaultKnobs()}
	o.Knobs.Bands = splitList(*bands)
	o.Knobs.Perturb = *perturb
	if *scenarios != "" {
		o.Stations = map[string]sim.Spec{}
		for _, path := range splitList(*scenarios) {
			s, err := sim.LoadSpec(path)
			if err != nil {
				return err
			}
			name := strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
			o.Stations[name] = s
			o.Names = append(o.Names, name)
		}
	} else if *presets != "" {
		o.Stations = map[string]sim.Spec{}
		for _, name := range splitList(*presets) {
			s, err := sim.Preset(name)
			if err != nil {
				return usageError{err}
			}
			o.Stations[name] = s
			o.Names = append(o.Names, name)
		}
	}
	if !*quiet {
		o.Progress = func(done, total int) {
			if done == total || done%max(1, total/20) == 0 {
				fmt.Fprintf(stderr, "\rbench: %d/%d scenarios", done, total)
				if done == total {
					fmt.Fprintln(stderr)
				}
			}
		}
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	rep, err := bench.Run(ctx, o)
	if err != nil {
		return err
	}
	if *cases != "" {
		if err := writeCases(*cases, rep.Cases); err != nil {
			return err
		}
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(struct {
			Scenarios  int                      `json:"scenarios"`
			Map        string                   `json:"map"`
			Seed       uint64                   `json:"seed"`
			Strategies map[string]bench.Summary `json:"strategies"`
		}{rep.Scenarios, string(rep.Map), rep.Seed, rep.Strategies})
	}
	printBench(stdout, rep)
	return nil
}

func splitList(s string) []string {
	var out []string
	for _, p := range strings.Split(s, ",") {
		if p = strings.TrimSpace(p); p != "" {
			out = append(out, p)
		}
	}
	return out
}

func printBench(w io.Writer, rep bench.Report) {
	fmt.Fprintf(w, "%d scenarios, map %s, seed %d (virtual seconds; %.1f s of CPU wall time)\n\n", rep.Scenarios, rep.Map, rep.Seed, rep.Wall.Seconds())
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "strategy\tsuccess\tmedian tune\tp95 tune\tmedian RF\tmedian SWR excess\tmedian overhead\tpre-position hits\tlimit crossings\tstalls\t")
	for _, name := range bench.Strategies {
		s := rep.Strategies[name]
		hits := "–"
		if name == bench.Tankd && rep.Map == bench.Warm {
			hits = fmt.Sprintf("%.1f %%", 100*s.PrepositionHitRate)
		}
		fmt.Fprintf(tw, "%s\t%.1f %%\t%.3f\t%.3f\t%.3f\t%.3f\t%.3f\t%s\t%d\t%d\t\n", name, 100*s.SuccessRate,
			s.MedianTuneS, s.P95TuneS, s.MedianRFS, s.MedianSWRExcess, s.MedianOverheadS, hits, s.LimitViolations, s.Stalls)
	}
	tw.Flush()
	t, e := rep.Strategies[bench.Tankd], rep.Strategies[bench.Exhaustive]
	if e.MedianTuneS > 0 {
		fmt.Fprintf(w, "\ntankd's median tune takes %.3f× the exhaustive sweep's.\n", t.MedianTuneS/e.MedianTuneS)
	}
	// the failures, so that they can be looked into
	var fails []bench.Case
	for _, c := range rep.Cases {
		if c.Strategy == bench.Tankd && !c.Success {
			fails = append(fails, c)
		}
	}
	sort.Slice(fails, func(i, j int) bool { return fails[i].Scenario < fails[j].Scenario })
	for i, c := range fails {
		if i == 10 {
			fmt.Fprintf(w, "… and %d more\n", len(fails)-10)
			break
		}
		fmt.Fprintf(w, "tankd missed scenario %d (%s, %s, %.0f Hz): %s, SWR %.3f against %.3f best\n",
			c.Scenario, c.Station, c.Band, c.FreqHz, c.Outcome, c.SWR, c.BestSWR)
	}
}

func writeCases(path string, cases []bench.Case) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	fmt.Fprintln(f, "scenario,strategy,station,band,frequency_hz,outcome,success,tune_s,rf_s,swr,best_swr,preposition_swr")
	for _, c := range cases {
		fmt.Fprintf(f, "%d,%s,%s,%s,%.0f,%s,%t,%.6f,%.6f,%.4f,%.4f,%.4f\n", c.Scenario, c.Strategy, c.Station, c.Band,
			c.FreqHz, c.Outcome, c.Success, c.TuneS, c.RFS, c.SWR, c.BestSWR, c.PreSWR)
	}
	return f.Close()
}

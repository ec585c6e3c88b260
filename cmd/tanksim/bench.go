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
	ranges := fs.String("ranges", bench.StandardRanges, "the ranges the scenarios are drawn from: "+
		"standard (the presets, as first published) or harsh (wider ranges, and small, switchless and poorly matched loops besides the presets)")
	asJSON := fs.Bool("json", false, "print the report as JSON")
	scenarios := fs.String("scenarios", "", "station files (TOML, comma-separated) to bench instead of the built-in presets: "+
		"what a file sets is kept, what it leaves out is drawn from the ranges")
	presets := fs.String("stations", "", "stations of the ranges to draw from, comma-separated (default all)")
	bands := fs.String("bands", "160m,80m,40m", "bands to draw frequencies from")
	perturb := fs.Bool("perturb", true, "let each simulated loop differ from its description (strays, size, capacitor range) as real ones do")
	workers := nf.Int("workers", 0, workersRange, "parallel `workers`")
	cases := fs.String("cases", "", "also write every scenario's outcome per strategy to this CSV file")
	stepped := fs.Bool("stepped", false, "run the reference strategies through the motion loop and the simulator instead of computing them from the truth (a hundred times slower; to check them)")
	quiet := fs.Bool("q", false, "no progress on standard error")
	fs.Usage = func() {
		fmt.Fprintln(stderr, `usage: tanksim bench [flags]

Runs seeded scenarios through the real controller against the simulator, on the virtual clock,
and, on the same scenarios, two references computed from the simulator's truth: an exhaustive
fixed-step sweep and an oracle that knows the best position. Times are virtual seconds. Besides
the strategies' figures it prints where tankd's time goes (phases), how well the memory map's
σ held (coverage) and tankd's figures station by station.

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
	knobs, catalogue, err := bench.RangesNamed(*ranges)
	if err != nil {
		return usageError{fmt.Errorf("-ranges: %w", err)}
	}
	o := bench.Options{N: *n, Seed: *seed, Map: m, Ranges: *ranges, Workers: *workers, Knobs: knobs, Stepped: *stepped}
	o.Knobs.Bands = splitList(*bands)
	o.Knobs.Perturb = *perturb
	if *scenarios != "" {
		o.Stations = map[string]sim.Spec{}
		o.Knobs.Fixed = map[string]map[string]bool{}
		for _, path := range splitList(*scenarios) {
			s, fixed, err := bench.LoadStation(path)
			if err != nil {
				return err
			}
			name := strings.TrimSuffix(filepath.Base(path), filepath.Ext(path))
			o.Stations[name] = s
			o.Knobs.Fixed[name] = fixed
			o.Names = append(o.Names, name)
		}
	} else {
		o.Stations = catalogue
		if *presets != "" {
			o.Stations = map[string]sim.Spec{}
			for _, name := range splitList(*presets) {
				s, ok := catalogue[name]
				if !ok {
					return usageError{fmt.Errorf("-stations %q: the %s ranges have %s", name, *ranges, strings.Join(sortedNames(catalogue), ", "))}
				}
				o.Stations[name] = s
				o.Names = append(o.Names, name)
			}
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
		return enc.Encode(rep)
	}
	printBench(stdout, rep, *scenarios != "")
	return nil
}

func sortedNames(m map[string]sim.Spec) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
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

// pct prints a share as a percentage.
func pct(x float64) string { return fmt.Sprintf("%.1f %%", 100*x) }

func printBench(w io.Writer, rep bench.Report, files bool) {
	fmt.Fprintf(w, "%d scenarios, map %s, seed %d, %s ranges (virtual seconds; %.1f s of CPU wall time)\n\n",
		rep.Scenarios, rep.Map, rep.Seed, rep.Ranges, rep.Wall.Seconds())
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "strategy\tsuccess\tmedian tune\tp95 tune\tmedian RF\tmedian SWR excess\tmedian overhead\tpre-position hits\tlimit crossings\tstalls\t")
	for _, name := range bench.Strategies {
		s := rep.Strategies[name]
		hits := "–"
		if name == bench.Tankd && rep.Map == bench.Warm {
			hits = pct(s.PrepositionHitRate)
		}
		fmt.Fprintf(tw, "%s\t%s\t%.3f\t%.3f\t%.3f\t%.3f\t%.3f\t%s\t%d\t%d\t\n", name, pct(s.SuccessRate),
			s.MedianTuneS, s.P95TuneS, s.MedianRFS, s.MedianSWRExcess, s.MedianOverheadS, hits, s.LimitViolations, s.Stalls)
	}
	tw.Flush()
	t, e := rep.Strategies[bench.Tankd], rep.Strategies[bench.Exhaustive]
	if e.MedianTuneS > 0 {
		fmt.Fprintf(w, "\ntankd's median tune takes %.3f× the exhaustive sweep's.\n", t.MedianTuneS/e.MedianTuneS)
	}

	fmt.Fprintf(w, "\nwhere the time goes (mean seconds a tune; the phases add up to the mean tune, RF overlaps them)\n\n")
	tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprint(tw, "strategy\ttune\t")
	for _, p := range bench.PhaseNames {
		fmt.Fprintf(tw, "%s\t", p)
	}
	fmt.Fprintln(tw, "RF\t")
	for _, name := range bench.Strategies {
		s := rep.Strategies[name]
		fmt.Fprintf(tw, "%s\t%.3f\t", name, s.MeanTuneS)
		for _, v := range s.MeanPhases().Values() {
			fmt.Fprintf(tw, "%.3f\t", v)
		}
		fmt.Fprintf(tw, "%.3f\t\n", s.MeanRFS)
	}
	tw.Flush()

	nc := bench.NormalCoverage()
	fmt.Fprintf(w, "\nthe map's σ: tankd's predictions against the true best position (a normal error: %s, %s, %s within 1, 2, 3 σ; median %.3f σ)\n\n",
		pct(nc.Within1), pct(nc.Within2), pct(nc.Within3), nc.MedianErrorSigmas)
	tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "prediction\ttunes\twithin 1σ\twithin 2σ\twithin 3σ\tmedian |error|/σ\t")
	row := func(label string, c bench.Coverage) {
		if c.N == 0 {
			fmt.Fprintf(tw, "%s\t0\t–\t–\t–\t–\t\n", label)
			return
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%s\t%.3f\t\n", label, c.N, pct(c.Within1), pct(c.Within2), pct(c.Within3), c.MedianErrorSigmas)
	}
	cv := rep.Coverage
	row("all", cv.All)
	for _, src := range []string{"map", "anchored-prior", "prior"} {
		row("from the "+src, cv.BySource[src])
	}
	row("between learned points", cv.ByExtent[bench.ExtentBetween])
	row("beyond them", cv.ByExtent[bench.ExtentBeyond])
	row("nothing learned", cv.ByExtent[bench.ExtentNone])
	tw.Flush()

	fmt.Fprintf(w, "\ntankd by station\n\n")
	tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "station\tscenarios\tsuccess\tmedian tune\tmedian RF\tmedian overhead\tpre-position hits\twithin 2σ\tmedian |error|/σ\t")
	names := make([]string, 0, len(rep.ByStation))
	for n := range rep.ByStation {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		s := rep.ByStation[n]
		hits := "–"
		if rep.Map == bench.Warm {
			hits = pct(s.PrepositionHitRate)
		}
		cov, med := "–", "–"
		if s.Coverage.N > 0 {
			cov, med = pct(s.Coverage.Within2), fmt.Sprintf("%.3f", s.Coverage.MedianErrorSigmas)
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%.3f\t%.3f\t%.3f\t%s\t%s\t%s\t\n", n, s.Scenarios, pct(s.SuccessRate),
			s.MedianTuneS, s.MedianRFS, s.MedianOverheadS, hits, cov, med)
	}
	tw.Flush()

	if files {
		printDrawn(w, rep)
	}

	// the failures, so that they can be looked into
	var fails []bench.Case
	for _, c := range rep.Cases {
		if c.Strategy == bench.Tankd && !c.Success {
			fails = append(fails, c)
		}
	}
	if len(fails) > 0 {
		fmt.Fprintln(w)
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

// printDrawn says, for benched station files, which values each scenario draws and from where.
func printDrawn(w io.Writer, rep bench.Report) {
	fmt.Fprintln(w)
	byStation := map[string][]bench.Draw{}
	var perturbed []bench.Draw
	for _, d := range rep.Drawn {
		if strings.Contains(d.Range, "in the truth only") {
			perturbed = append(perturbed, d)
			continue
		}
		byStation[d.Station] = append(byStation[d.Station], d)
	}
	stations := map[string]bool{}
	for _, c := range rep.Cases {
		stations[c.Station] = true
	}
	for _, n := range sortedKeys(stations) {
		ds := byStation[n]
		if len(ds) == 0 {
			fmt.Fprintf(w, "%s: nothing drawn: every simulator value is the file's\n", n)
			continue
		}
		fmt.Fprintf(w, "%s: the file leaves these out; each scenario draws them:\n", n)
		for _, d := range ds {
			fmt.Fprintf(w, "  %s: %s\n", d.Key, d.Range)
		}
	}
	if len(perturbed) > 0 {
		fmt.Fprintln(w, "the simulated loops differ from their files as real ones from their drawings (-perturb=false benches them as described):")
		seen := map[string]bool{}
		for _, d := range perturbed {
			if !seen[d.Key] {
				seen[d.Key] = true
				fmt.Fprintf(w, "  %s: %s\n", d.Key, d.Range)
			}
		}
	}
}

func sortedKeys(m map[string]bool) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// writeCases writes every case as CSV: the columns of the first benchmark, then the phases and
// tankd's prediction against the truth (empty where there is none).
func writeCases(path string, cases []bench.Case) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	fmt.Fprint(f, "scenario,strategy,station,band,frequency_hz,outcome,success,tune_s,rf_s,swr,best_swr,preposition_swr")
	for _, p := range bench.PhaseNames {
		fmt.Fprintf(f, ",%s_s", p)
	}
	fmt.Fprintln(f, ",prediction_source,prediction_extent,prediction_sigma,prediction_error_sigmas")
	for _, c := range cases {
		fmt.Fprintf(f, "%d,%s,%s,%s,%.0f,%s,%t,%.6f,%.6f,%.4f,%.4f,%.4f", c.Scenario, c.Strategy, c.Station, c.Band,
			c.FreqHz, c.Outcome, c.Success, c.TuneS, c.RFS, c.SWR, c.BestSWR, c.PreSWR)
		for _, v := range c.Phases.Values() {
			fmt.Fprintf(f, ",%.6f", v)
		}
		if p := c.Prediction; p != nil {
			fmt.Fprintf(f, ",%s,%s,%.3f,%.4f\n", p.Source, p.Extent, p.Sigma, p.ErrorSigmas)
		} else {
			fmt.Fprintln(f, ",,,,")
		}
	}
	return f.Close()
}

package bench

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"
	"time"

	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
)

// Options configure a benchmark run.
type Options struct {
	N        int
	Seed     uint64
	Map      MapState
	Stations map[string]sim.Spec // default sim.Presets()
	Names    []string            // which of Stations to draw from; default all, sorted
	Knobs    Knobs               // zero: DefaultKnobs
	Workers  int                 // default GOMAXPROCS
	// Progress, if set, is called after each scenario (from the worker goroutines, serialised).
	Progress func(done, total int)
}

// Case is one scenario's outcome under one strategy.
type Case struct {
	Scenario      int     `json:"scenario"`
	Strategy      string  `json:"strategy"`
	Station       string  `json:"station"`
	Band          string  `json:"band"`
	FreqHz        float64 `json:"frequency_hz"`
	Outcome       string  `json:"outcome"`
	Success       bool    `json:"success"`
	TuneS         float64 `json:"tune_s"`
	RFS           float64 `json:"rf_s"`
	SWR           float64 `json:"swr"`
	BestSWR       float64 `json:"best_swr"`
	PreSWR        float64 `json:"preposition_swr,omitempty"`
	Prepositioned bool    `json:"prepositioned,omitempty"`
	// LimitViolations, Stalls and ControllerLimitViolations are the rig's counts over the
	// whole scenario, warm history included (Rig.LimitViolations, Rig.Stalls,
	// Rig.ControllerLimitViolations).
	LimitViolations           int   `json:"limit_violations"`
	Stalls                    int64 `json:"stalls"`
	ControllerLimitViolations int   `json:"controller_limit_violations"`
}

// Summary is one strategy's figures over all scenarios; the JSON keys are the benchmark's
// documented output.
type Summary struct {
	SuccessRate        float64 `json:"success_rate"`
	MedianTuneS        float64 `json:"median_tune_s"`
	P95TuneS           float64 `json:"p95_tune_s"`
	MedianRFS          float64 `json:"median_rf_s"`
	MedianSWRExcess    float64 `json:"median_swr_excess"`
	MedianOverheadS    float64 `json:"median_overhead_s"`
	PrepositionHitRate float64 `json:"preposition_hit_rate"`
	// LimitViolations counts moves that took the simulator's true shaft outside the soft
	// limits by more than the gear play accounts for (Rig.LimitViolations); Stalls counts pulses
	// the motor received against a hard end stop (Rig.Stalls). Both are the truth, which the
	// controller cannot see; both should be 0.
	LimitViolations int   `json:"limit_violations"`
	Stalls          int64 `json:"stalls"`
	// ControllerLimitViolations counts moves outside the soft limits in the controller's own
	// coordinates (Rig.ControllerLimitViolations): a check of its bookkeeping, blind to lost
	// steps.
	ControllerLimitViolations int `json:"controller_limit_violations"`
}

// Report is a whole run.
type Report struct {
	Scenarios  int                `json:"scenarios"`
	Map        MapState           `json:"map"`
	Seed       uint64             `json:"seed"`
	Strategies map[string]Summary `json:"strategies"`
	Cases      []Case             `json:"-"`
	Wall       time.Duration      `json:"-"`
}

// SuccessTolerance: a tune succeeds when its final SWR is within this of the best achievable.
const SuccessTolerance = 0.1

// HitSWR: a pre-position hits when the SWR there, before any RF, is at most this.
const HitSWR = 2

// Run generates the scenarios and runs every strategy on each, in parallel across scenarios;
// the report is the same for the same options whatever the parallelism.
func Run(ctx context.Context, o Options) (Report, error) {
	began := time.Now()
	if o.Stations == nil {
		o.Stations = sim.Presets()
	}
	if len(o.Names) == 0 {
		for n := range o.Stations {
			o.Names = append(o.Names, n)
		}
		sort.Strings(o.Names)
	}
	if o.Knobs.Bands == nil {
		// Ranges left out take the defaults; a test mode asked for stays on.
		j := o.Knobs.Jitter
		o.Knobs = DefaultKnobs()
		o.Knobs.Jitter = j
	}
	if o.Workers <= 0 {
		o.Workers = runtime.GOMAXPROCS(0)
	}
	if o.Map == "" {
		o.Map = Cold
	}
	scs, err := Generate(o.Stations, o.Names, o.N, o.Seed, o.Map, o.Knobs)
	if err != nil {
		return Report{}, err
	}
	results := make([][]caseResult, len(scs))
	errs := make([]error, len(scs))
	var wg sync.WaitGroup
	var mu sync.Mutex
	done := 0
	next := make(chan int)
	for range o.Workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				results[i], errs[i] = runScenario(ctx, scs[i], o.Knobs)
				if o.Progress != nil {
					mu.Lock()
					done++
					o.Progress(done, len(scs))
					mu.Unlock()
				}
			}
		}()
	}
feed:
	for i := range scs {
		select {
		case next <- i:
		case <-ctx.Done():
			break feed
		}
	}
	close(next)
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return Report{}, err
	}
	for i, err := range errs {
		if err != nil {
			return Report{}, fmt.Errorf("bench: scenario %d (%s, %v): %w", i, scs[i].Base, scs[i].Freq, err)
		}
	}
	rep := Report{Scenarios: len(scs), Map: o.Map, Seed: o.Seed, Strategies: map[string]Summary{}}
	for _, rs := range results {
		for _, r := range rs {
			rep.Cases = append(rep.Cases, r.Case)
		}
	}
	for _, name := range Strategies {
		rep.Strategies[name] = summarise(name, results)
	}
	rep.Wall = time.Since(began)
	return rep, nil
}

type caseResult struct {
	Case
	oracleS float64
}

// runScenario runs every strategy on a fresh rig for the scenario; the history (warm) is
// replayed with the controller before each, identically, as the seeds are the same.
func runScenario(ctx context.Context, sc Scenario, k Knobs) ([]caseResult, error) {
	var out []caseResult
	for _, strat := range Strategies {
		pre := math.NaN()
		var r *Rig
		obs := tune.ObserverFunc(func(e tune.Event) {
			if e.Kind == tune.KindPositioned {
				pre = r.Station.TrueSWR(Hz(e.Freq))
			}
		})
		var err error
		r, err = NewRig(RigOptions{Truth: sc.Truth, Described: sc.Described, Start: sc.Start, Observer: obs,
			NominalBacklash: nominalBacklash(k), Jitter: sc.Jitter})
		if err != nil {
			return nil, err
		}
		if !r.Axis.Trusted() {
			// a home switch: home at installation, before anything is measured
			if res := r.Tuner.Home(ctx); res.Outcome != tune.Homed {
				return nil, fmt.Errorf("homing: %s: %w", res.Outcome, res.Err)
			}
		}
		if err := history(ctx, r, sc); err != nil {
			return nil, err
		}
		r.Clock.Advance(sc.At.Sub(r.Clock.Now()))
		pre = math.NaN()
		var a attempt
		switch strat {
		case Tankd:
			a, err = runTankd(ctx, r, sc, &pre)
		case Exhaustive:
			a, err = runExhaustive(ctx, r, sc)
		case Oracle:
			a, err = runOracle(ctx, r, sc)
		}
		if err != nil {
			return nil, fmt.Errorf("%s: %w", strat, err)
		}
		f := Hz(sc.Freq)
		_, best, err := r.Station.Best(f)
		if err != nil {
			return nil, err
		}
		swr := r.Station.TrueSWR(f)
		c := caseResult{Case: Case{
			Scenario: sc.ID, Strategy: strat, Station: sc.Base, Band: sc.Band, FreqHz: f, Outcome: a.outcome,
			TuneS: a.tuneTime.Seconds(), RFS: a.rfTime.Seconds(), SWR: swr, BestSWR: best,
			Success: swr <= best+SuccessTolerance, Prepositioned: a.prepositioned,
			LimitViolations: r.LimitViolations(), Stalls: r.Stalls(),
			ControllerLimitViolations: r.ControllerLimitViolations(),
		}}
		if a.prepositioned {
			c.PreSWR = a.preSWR
		}
		out = append(out, c)
	}
	for i := range out {
		out[i].oracleS = out[len(out)-1].TuneS
	}
	return out, nil
}

// nominalBacklash is what the controller is told of the play before calibrating: an upper
// bound over the scenarios' range.
func nominalBacklash(k Knobs) int64 { return int64(k.Backlash[1]) + 20 }

// history replays the warm scenario's earlier tunes: a backlash calibration at the first, then
// a tune at each, at its time.
func history(ctx context.Context, r *Rig, sc Scenario) error {
	for i, v := range sc.History {
		r.Clock.Advance(v.At.Sub(r.Clock.Now()))
		if err := r.Station.Radio.SetFrequency(v.Freq); err != nil {
			return err
		}
		var res tune.Result
		if i == 0 {
			res = r.Tuner.Calibrate(ctx, v.Freq)
		} else {
			res = r.Tuner.Tune(ctx, tune.Request{Freq: v.Freq, RF: true})
		}
		if res.Outcome == tune.Fault {
			return fmt.Errorf("history tune %d at %v: %s: %w", i, v.Freq, res.Outcome, res.Err)
		}
	}
	return nil
}

func summarise(name string, results [][]caseResult) Summary {
	var s Summary
	var tunes, rfs, excess, overhead []float64
	hits, warm, ok := 0, 0, 0
	for _, rs := range results {
		for _, r := range rs {
			if r.Strategy != name {
				continue
			}
			if r.Success {
				ok++
			}
			tunes = append(tunes, r.TuneS)
			rfs = append(rfs, r.RFS)
			excess = append(excess, r.SWR-r.BestSWR)
			overhead = append(overhead, r.TuneS-r.oracleS)
			if r.Prepositioned {
				warm++
				if r.PreSWR <= HitSWR {
					hits++
				}
			}
			s.LimitViolations += r.LimitViolations
			s.Stalls += r.Stalls
			s.ControllerLimitViolations += r.ControllerLimitViolations
		}
	}
	n := len(tunes)
	if n == 0 {
		return s
	}
	s.SuccessRate = float64(ok) / float64(n)
	s.MedianTuneS = quantile(tunes, 0.5)
	s.P95TuneS = quantile(tunes, 0.95)
	s.MedianRFS = quantile(rfs, 0.5)
	s.MedianSWRExcess = quantile(excess, 0.5)
	s.MedianOverheadS = quantile(overhead, 0.5)
	if warm > 0 {
		s.PrepositionHitRate = float64(hits) / float64(warm)
	}
	return s
}

// quantile is the q-quantile by linear interpolation between order statistics.
func quantile(v []float64, q float64) float64 {
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	if len(s) == 1 {
		return s[0]
	}
	x := q * float64(len(s)-1)
	i := int(math.Floor(x))
	if i >= len(s)-1 {
		return s[len(s)-1]
	}
	return s[i] + (s[i+1]-s[i])*(x-float64(i))
}

package bench

import (
	"context"
	"errors"
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
	N    int
	Seed uint64
	Map  MapState
	// Ranges names the set of ranges (StandardRanges, HarshRanges) that Stations and Knobs
	// default to; default StandardRanges.
	Ranges   string
	Stations map[string]sim.Spec // default the ranges' stations (RangesNamed)
	Names    []string            // which of Stations to draw from; default all, sorted
	Knobs    Knobs               // zero Bands: the ranges' knobs (Jitter and Fixed kept)
	Workers  int                 // default GOMAXPROCS
	// Stepped runs the references (exhaustive, oracle) through the motion loop and the
	// simulator, each on a rig of its own with the warm history replayed again, as the
	// benchmark first did: a hundred times the CPU, for checking the references computed from
	// the truth (see exhaustiveFromTruth).
	Stepped bool
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
	// Phases is where the tune's time went; they add up to TuneS.
	Phases Phases `json:"phases"`
	// Prediction is the map's prediction the tune started from and its error against the
	// truth (tankd only; see Prediction).
	Prediction *Prediction `json:"prediction,omitempty"`
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
	// MeanTuneS and MeanRFS are the means of the tune and RF times. Then each phase's mean
	// (the six add up to MeanTuneS) and median (which need not add up to anything), as flat
	// keys: mean_travel_s … mean_other_s, median_travel_s … median_other_s (see Phases).
	MeanTuneS       float64 `json:"mean_tune_s"`
	MeanRFS         float64 `json:"mean_rf_s"`
	MeanTravelS     float64 `json:"mean_travel_s"`
	MeanSettleS     float64 `json:"mean_settle_s"`
	MeanReadingsS   float64 `json:"mean_readings_s"`
	MeanApproachS   float64 `json:"mean_approach_s"`
	MeanVerifyS     float64 `json:"mean_verify_s"`
	MeanOtherS      float64 `json:"mean_other_s"`
	MedianTravelS   float64 `json:"median_travel_s"`
	MedianSettleS   float64 `json:"median_settle_s"`
	MedianReadingsS float64 `json:"median_readings_s"`
	MedianApproachS float64 `json:"median_approach_s"`
	MedianVerifyS   float64 `json:"median_verify_s"`
	MedianOtherS    float64 `json:"median_other_s"`
}

// MeanPhases are the phases' means.
func (s Summary) MeanPhases() Phases {
	return Phases{Travel: s.MeanTravelS, Settle: s.MeanSettleS, Readings: s.MeanReadingsS,
		Approach: s.MeanApproachS, Verify: s.MeanVerifyS, Other: s.MeanOtherS}
}

// MedianPhases are the phases' medians.
func (s Summary) MedianPhases() Phases {
	return Phases{Travel: s.MedianTravelS, Settle: s.MedianSettleS, Readings: s.MedianReadingsS,
		Approach: s.MedianApproachS, Verify: s.MedianVerifyS, Other: s.MedianOtherS}
}

// StationSummary is tankd's figures on the scenarios drawn from one station (Report.ByStation).
type StationSummary struct {
	Scenarios          int     `json:"scenarios"`
	SuccessRate        float64 `json:"success_rate"`
	MedianTuneS        float64 `json:"median_tune_s"`
	MedianRFS          float64 `json:"median_rf_s"`
	MedianOverheadS    float64 `json:"median_overhead_s"`
	PrepositionHitRate float64 `json:"preposition_hit_rate"`
	// Coverage is the map's σ coverage on those scenarios (see Coverage).
	Coverage Coverage `json:"coverage"`
}

// Report is a whole run. Its JSON is tanksim bench -json: the keys of the first benchmark
// (scenarios, map, seed, strategies) and those added since (ranges, drawn, coverage,
// by_station, and in each strategy the mean and phase figures).
type Report struct {
	Scenarios  int                `json:"scenarios"`
	Map        MapState           `json:"map"`
	Seed       uint64             `json:"seed"`
	Ranges     string             `json:"ranges"`
	Strategies map[string]Summary `json:"strategies"`
	// Coverage is the map's σ coverage over tankd's tunes (see CoverageReport).
	Coverage CoverageReport `json:"coverage"`
	// ByStation is tankd's figures station by station.
	ByStation map[string]StationSummary `json:"by_station"`
	// Drawn lists the values drawn for each scenario and their ranges (see Drawn): with a
	// station file, what the file leaves out.
	Drawn []Draw        `json:"drawn"`
	Cases []Case        `json:"-"`
	Wall  time.Duration `json:"-"`
}

// SuccessTolerance: a tune succeeds when its final SWR is within this of the best achievable.
const SuccessTolerance = 0.1

// HitSWR: a pre-position hits when the SWR there, before any RF, is at most this.
const HitSWR = 2

// Run generates the scenarios and runs every strategy on each, in parallel across scenarios;
// the report is the same for the same options whatever the parallelism.
func Run(ctx context.Context, o Options) (Report, error) {
	began := time.Now()
	if o.Ranges == "" {
		o.Ranges = StandardRanges
	}
	knobs, stations, err := RangesNamed(o.Ranges)
	if err != nil {
		return Report{}, err
	}
	if o.Stations == nil {
		o.Stations = stations
	}
	if len(o.Names) == 0 {
		for n := range o.Stations {
			o.Names = append(o.Names, n)
		}
		sort.Strings(o.Names)
	}
	if o.Knobs.Bands == nil {
		// Ranges left out take the set's; a test mode asked for and the file's keys stay.
		knobs.Jitter, knobs.Fixed = o.Knobs.Jitter, o.Knobs.Fixed
		o.Knobs = knobs
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
				results[i], errs[i] = runScenario(ctx, scs[i], o.Stepped)
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
	rep := Report{Scenarios: len(scs), Map: o.Map, Seed: o.Seed, Ranges: o.Ranges, Strategies: map[string]Summary{},
		Drawn: Drawn(o.Stations, o.Names, o.Knobs)}
	if rep.Drawn == nil {
		rep.Drawn = []Draw{} // nothing drawn: an empty list, not null
	}
	var flat []caseResult
	for _, rs := range results {
		for _, r := range rs {
			rep.Cases = append(rep.Cases, r.Case)
			flat = append(flat, r)
		}
	}
	for _, name := range Strategies {
		rep.Strategies[name] = summarise(name, flat)
	}
	rep.Coverage = coverageReport(rep.Cases)
	rep.ByStation = byStation(flat)
	rep.Wall = time.Since(began)
	return rep, nil
}

type caseResult struct {
	Case
	oracleS float64
}

// runScenario runs the scenario: the rig is built and, warm, its history replayed once; then
// the references are computed from the truth as it stands (or, stepped, run on rigs of their
// own), and the controller tunes.
func runScenario(ctx context.Context, sc Scenario, stepped bool) ([]caseResult, error) {
	pre := math.NaN()
	var r *Rig
	var probe predictionProbe
	obs := tune.ObserverFunc(func(e tune.Event) {
		switch e.Kind {
		case tune.KindPositioned:
			// where the prediction put the motor, stopped there or not (straight to the
			// search's start): the SWR there as an up-approach leaves it
			pre = positionedSWR(r, e)
		case tune.KindPrediction:
			probe.observe(r, e)
		}
	})
	r, err := prepared(ctx, sc, obs, func(rig *Rig) { r = rig })
	if err != nil {
		return nil, err
	}
	pre = math.NaN()
	tr, err := newTruth(sc.Truth, sc.Seed)
	if err != nil {
		return nil, err
	}
	var refs []caseResult
	if !stepped {
		refs, err = fromTruth(r, sc, tr)
		if errors.Is(err, errStepIt) {
			stepped = true
		} else if err != nil {
			return nil, err
		}
	}
	probe.on = true
	a, err := runTankd(ctx, r, sc, &pre)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", Tankd, err)
	}
	c, err := caseOf(r, sc, Tankd, a)
	if err != nil {
		return nil, err
	}
	c.Phases = r.Phases()
	if c.Prediction, err = probe.prediction(sc, tr); err != nil {
		return nil, err
	}
	out := []caseResult{c}
	if stepped {
		for _, strat := range []string{Exhaustive, Oracle} {
			// The same observer's queries as the controller's rig, so that the simulator (whose
			// RF model caches by temperature) answers the history as it did there.
			var r *Rig
			r, err := prepared(ctx, sc, tune.ObserverFunc(func(e tune.Event) {
				if e.Kind == tune.KindPositioned {
					positionedSWR(r, e)
				}
			}), func(rig *Rig) { r = rig })
			if err != nil {
				return nil, err
			}
			var a attempt
			if strat == Exhaustive {
				a, err = runExhaustive(ctx, r, sc)
			} else {
				a, err = runOracle(ctx, r, sc)
			}
			if err != nil {
				return nil, fmt.Errorf("%s: %w", strat, err)
			}
			c, err := caseOf(r, sc, strat, a)
			if err != nil {
				return nil, err
			}
			c.Phases = r.Phases()
			out = append(out, c)
		}
	} else {
		out = append(out, refs...)
	}
	for i := range out {
		out[i].oracleS = out[len(out)-1].TuneS
	}
	return out, nil
}

// prepared builds the scenario's rig and brings it to the measured tune's instant: homed if it
// has a switch, warm with its history. bind is handed the rig as soon as it is built, for an
// observer that reads it.
func prepared(ctx context.Context, sc Scenario, obs tune.Observer, bind func(*Rig)) (*Rig, error) {
	o := scenarioRig(sc)
	o.Observer = obs
	return preparedWith(ctx, sc, o, bind)
}

// scenarioRig is the rig the scenario describes, as the bench builds it.
func scenarioRig(sc Scenario) RigOptions {
	nominal := sc.Nominal
	if nominal == 0 {
		nominal = DefaultKnobs().nominal("")
	}
	return RigOptions{Truth: sc.Truth, Described: sc.Described, Start: sc.Start,
		NominalBacklash: nominal, Jitter: sc.Jitter}
}

// preparedWith is prepared on a rig built with o (the scenario's, with wrappers or an observer).
func preparedWith(ctx context.Context, sc Scenario, o RigOptions, bind func(*Rig)) (*Rig, error) {
	r, err := NewRig(o)
	if err != nil {
		return nil, err
	}
	bind(r)
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
	return r, nil
}

// caseOf is the case of a strategy that has run on the rig: the truth at the end of it.
func caseOf(r *Rig, sc Scenario, strat string, a attempt) (caseResult, error) {
	f := Hz(sc.Freq)
	_, best, err := r.Station.Best(f)
	if err != nil {
		return caseResult{}, err
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
	return c, nil
}

// fromTruth computes the references' cases from the truth at the rig's instant, leaving the rig
// as it is.
func fromTruth(r *Rig, sc Scenario, tr *truth) ([]caseResult, error) {
	var out []caseResult
	for i, strat := range []string{Exhaustive, Oracle} {
		a, err := dryAxisAt(r, tr, uint64(i))
		if err != nil {
			return nil, err
		}
		var res refResult
		if strat == Exhaustive {
			res, err = exhaustiveFromTruth(a, r.Described, sc.Freq)
		} else {
			res, err = oracleFromTruth(a, sc.Freq)
		}
		if err != nil {
			return nil, fmt.Errorf("%s: %w", strat, err)
		}
		out = append(out, caseResult{Case: Case{
			Scenario: sc.ID, Strategy: strat, Station: sc.Base, Band: sc.Band, FreqHz: Hz(sc.Freq), Outcome: res.outcome,
			TuneS: res.tuneTime.Seconds(), RFS: res.rfTime.Seconds(), SWR: res.swr, BestSWR: res.best,
			Success: res.swr <= res.best+SuccessTolerance, Phases: res.phases,
			LimitViolations: r.LimitViolations(), Stalls: r.Stalls(),
			ControllerLimitViolations: r.ControllerLimitViolations(),
		}})
	}
	return out, nil
}

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

func summarise(name string, results []caseResult) Summary {
	var s Summary
	var tunes, rfs, excess, overhead []float64
	phases := make([][]float64, len(PhaseNames))
	hits, warm, ok := 0, 0, 0
	for _, r := range results {
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
		for i, v := range r.Phases.Values() {
			phases[i] = append(phases[i], v)
		}
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
	s.MeanTuneS, s.MeanRFS = mean(tunes), mean(rfs)
	means, medians := make([]float64, len(phases)), make([]float64, len(phases))
	for i, v := range phases {
		means[i], medians[i] = mean(v), quantile(v, 0.5)
	}
	mp, dp := phasesOf(means), phasesOf(medians)
	s.MeanTravelS, s.MeanSettleS, s.MeanReadingsS = mp.Travel, mp.Settle, mp.Readings
	s.MeanApproachS, s.MeanVerifyS, s.MeanOtherS = mp.Approach, mp.Verify, mp.Other
	s.MedianTravelS, s.MedianSettleS, s.MedianReadingsS = dp.Travel, dp.Settle, dp.Readings
	s.MedianApproachS, s.MedianVerifyS, s.MedianOtherS = dp.Approach, dp.Verify, dp.Other
	return s
}

// byStation is tankd's figures station by station.
func byStation(results []caseResult) map[string]StationSummary {
	groups := map[string][]caseResult{}
	for _, r := range results {
		groups[r.Station] = append(groups[r.Station], r)
	}
	out := map[string]StationSummary{}
	for name, rs := range groups {
		s := summarise(Tankd, rs)
		var cases []Case
		for _, r := range rs {
			cases = append(cases, r.Case)
		}
		n := 0
		for _, r := range rs {
			if r.Strategy == Tankd {
				n++
			}
		}
		out[name] = StationSummary{Scenarios: n, SuccessRate: s.SuccessRate, MedianTuneS: s.MedianTuneS,
			MedianRFS: s.MedianRFS, MedianOverheadS: s.MedianOverheadS, PrepositionHitRate: s.PrepositionHitRate,
			Coverage: coverageReport(cases).All}
	}
	return out
}

func mean(v []float64) float64 {
	if len(v) == 0 {
		return 0
	}
	var sum float64
	for _, x := range v {
		sum += x
	}
	return sum / float64(len(v))
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

// positionedSWR is the true SWR at the position a KindPositioned event reports (controller
// coordinates, turned into the mechanism's by the frame as it stands), as an up-approach
// leaves it: the pre-position's, whether the motor stopped there or went straight on to the
// search's start.
func positionedSWR(r *Rig, e tune.Event) float64 {
	off := r.Axis.Position() - r.Station.Mech.MotorPosition()
	return r.Station.SWRAt(Hz(e.Freq), e.Pos-float64(off))
}

package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"strings"

	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg/draw"
	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/band"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim/bench"
)

// historyRange bounds the warm-up: two hundred tunes teach a map more than a season of use
// (from memory), and take a while even on the virtual clock.
var historyRange = station.Range{Min: 1, Max: 200}

func runTune(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("tune", stderr)
	nf := newNumFlags(fs)
	geo := addGeometryFlags(fs, nf)
	freq := nf.Float("freq", 3.75e6, station.FrequencyRange(), "frequency to tune")
	mapState := fs.String("map", "cold", "cold: empty memory map; warm: calibrate and learn from -history earlier tunes first")
	history := nf.Int("history", 8, historyRange, "warm: how many earlier `tunes` teach the map (spread over the bands the loop covers)")
	seed := nf.Seed("seed", 1, "`seed` for the simulator's noise and the warm history")
	plotFile := fs.String("plot", "", "draw SWR against position to this .svg or .png file")
	verbose := fs.Bool("v", false, "print every reading")
	realTime := fs.Bool("realtime", false, "run on the wall clock: the tune takes as long as on real hardware")
	fs.Usage = func() {
		fmt.Fprintln(stderr, `usage: tanksim tune [flags]

Runs one tune of the real controller on a simulated loop, on the virtual clock, and prints each
stage as it happens: prediction, pre-position, coarse scan, fit, final approach, verify.

flags:`)
		fs.PrintDefaults()
	}
	if err := nf.parse(args); err != nil {
		return err
	}
	if *mapState != "cold" && *mapState != "warm" {
		return usageError{fmt.Errorf("-map %q: want cold or warm", *mapState)}
	}
	s, err := geo.spec(fs)
	if err != nil {
		return err
	}
	s.Simulator.Seed = *seed
	f := hz(*freq)
	w := &tuneWriter{out: stdout, verbose: *verbose}
	if *realTime && *mapState == "warm" {
		return usageError{fmt.Errorf("-realtime goes with -map cold: a warm-up would take hours of real time")}
	}
	r, err := bench.NewRig(bench.RigOptions{Truth: s, Observer: tune.ObserverFunc(w.observe), RealTime: *realTime})
	if err != nil {
		return err
	}
	w.rig = r
	ctx := context.Background()
	fmt.Fprintf(stdout, "%s: %v, backlash %.0f steps, %.0f steps per capacitor turn\n", s.Name, f, s.Drive.BacklashSteps, s.StepsPerTurn())
	if !r.Axis.Trusted() {
		if res := r.Tuner.Home(ctx); res.Outcome != tune.Homed {
			return fmt.Errorf("homing: %s: %v", res.Outcome, res.Err)
		}
		fmt.Fprintf(stdout, "homed at %d\n", r.Axis.Position())
	}
	if *mapState == "warm" {
		if err := warmUp(ctx, r, f, *history, *seed, stdout); err != nil {
			return err
		}
	}
	w.on = true
	res, err := r.Tune(ctx, f, true)
	if err != nil {
		return err
	}
	best, bestSWR, err := r.Station.Best(bench.Hz(f))
	if err != nil {
		return err
	}
	offset := r.Axis.Position() - r.Station.Mech.MotorPosition()
	fmt.Fprintf(stdout, "\noutcome %s", res.Outcome)
	if res.Err != nil {
		fmt.Fprintf(stdout, " (%v)", res.Err)
	}
	fmt.Fprintf(stdout, " in %.3f s, RF %.3f s, %d readings\n", res.Duration().Seconds(), res.RFTime.Seconds(), res.Readings)
	fmt.Fprintf(stdout, "final position %d, verified SWR %.3f; the simulator's true SWR there %.3f; best %d (SWR %.3f)\n",
		res.Pos, res.SWR, r.Station.TrueSWR(bench.Hz(f)), best+offset, bestSWR)
	for _, n := range res.Notes {
		fmt.Fprintf(stdout, "note: %s\n", n)
	}
	if *plotFile != "" {
		if err := plotTune(*plotFile, r, f, w, res); err != nil {
			return err
		}
		fmt.Fprintf(stdout, "wrote %s\n", *plotFile)
	}
	return nil
}

// warmUp calibrates and teaches the map at frequencies spread over the bands the loop covers.
func warmUp(ctx context.Context, r *bench.Rig, f interface{ String() string }, n int, seed uint64, out io.Writer) error {
	rng := rand.New(rand.NewPCG(seed, 0x7761726d))
	var bands []band.Band
	lo, hi := r.Axis.SoftLimits()
	for _, b := range band.All() {
		p, ok := r.Map.Predict(b.Centre(), r.Time.Now(), nil)
		// the loop must reach the band, and the radio transmit in it
		if ok && p.Pos > float64(lo)+500 && p.Pos < float64(hi)-500 && r.Station.Radio.SetFrequency(b.Centre()) == nil {
			bands = append(bands, b)
		}
	}
	if len(bands) == 0 {
		return fmt.Errorf("warm-up: the loop covers no band")
	}
	var learned []string
	for i := range n {
		b := bands[i%len(bands)]
		fr := b.Low + physic.Frequency(rng.Float64()*float64(b.High-b.Low))
		fr = fr / (10 * physic.Hertz) * (10 * physic.Hertz)
		if err := r.Station.Radio.SetFrequency(fr); err != nil {
			return err
		}
		var res tune.Result
		if i == 0 {
			res = r.Tuner.Calibrate(ctx, fr)
		} else {
			res = r.Tuner.Tune(ctx, tune.Request{Freq: fr, RF: true})
		}
		learned = append(learned, fmt.Sprintf("%.1f kHz %s", bench.Hz(fr)/1e3, res.Outcome))
		if i == 0 {
			learned[0] += fmt.Sprintf(" (backlash %d)", res.Backlash)
		}
		r.Clock.Advance(time30m(rng))
	}
	fmt.Fprintf(out, "warm-up: %s\n", strings.Join(learned, ", "))
	return nil
}

// tuneWriter prints the tuner's events as they come and keeps the readings for the plot.
type tuneWriter struct {
	out     io.Writer
	rig     *bench.Rig
	on      bool
	verbose bool
	t0      float64
	started bool
	coarse  plotter.XYs
	fine    plotter.XYs
	stage   string
	n       int
	fit     *tune.FitReport
}

func (w *tuneWriter) observe(e tune.Event) {
	if !w.on {
		return
	}
	t := float64(e.At.UnixNano()) / 1e9
	if !w.started {
		w.t0, w.started = t, true
	}
	at := t - w.t0
	switch e.Kind {
	case tune.KindReading:
		switch e.Stage {
		case "coarse":
			w.coarse = append(w.coarse, plotter.XY{X: e.Pos, Y: clipSWR(e.SWR)})
		case "fine":
			w.fine = append(w.fine, plotter.XY{X: e.Pos, Y: clipSWR(e.SWR)})
		}
		if e.Stage != w.stage {
			w.flushReadings()
			w.stage = e.Stage
		}
		w.n++
		if w.verbose || e.Stage == "verify" {
			fmt.Fprintf(w.out, "%8.3f s    reading %-7s pos %9.1f  SWR %6.3f  fwd %v\n", at, e.Stage, e.Pos, e.SWR, e.Forward)
		}
		return
	case tune.KindState:
		w.flushReadings()
		fmt.Fprintf(w.out, "%8.3f s  %s\n", at, e.State)
	case tune.KindPrediction:
		p := e.Prediction
		fmt.Fprintf(w.out, "%8.3f s  prediction (%s): position %.1f ± %.1f steps, dip half-width %.1f steps (loaded Q %.0f)\n",
			at, p.Source, p.Pos, p.Sigma, p.Width, p.Q)
	case tune.KindPositioned:
		truth := ""
		if w.rig != nil {
			off := w.rig.Axis.Position() - w.rig.Station.Mech.MotorPosition()
			truth = fmt.Sprintf(" (true SWR there %.2f)", w.rig.Station.SWRAt(bench.Hz(e.Freq), e.Pos-float64(off)))
		}
		if e.Text != "" {
			// the search went straight to its start: the prediction placed it, no stop there
			fmt.Fprintf(w.out, "%8.3f s  pre-positioned at %.0f without RF%s: %s\n", at, e.Pos, truth, e.Text)
			break
		}
		fmt.Fprintf(w.out, "%8.3f s  pre-positioned at %.0f without RF%s\n", at, e.Pos, truth)
	case tune.KindMove:
		w.flushReadings()
		speed := "full speed"
		if e.Speed > 0 {
			speed = fmt.Sprintf("%.0f steps/s", e.Speed)
		}
		fmt.Fprintf(w.out, "%8.3f s    move %-11s %9.0f → %d at %s\n", at, e.Stage, e.Pos, e.Target, speed)
	case tune.KindFit:
		f := e.Fit
		w.fit = f
		fmt.Fprintf(w.out, "%8.3f s    fit (%s, %d readings): centre %.2f, half-width %.1f steps, loaded Q %.0f, bandwidth %.0f Hz, lowest SWR %.3f, χ² %.1f\n",
			at, f.Method, f.Samples, f.Centre, f.HalfWidth, f.QLoaded, f.Bandwidth, f.MinSWR, f.Chi2)
	case tune.KindResult:
		w.flushReadings()
	default:
		fmt.Fprintf(w.out, "%8.3f s    %s\n", at, e.Text)
	}
}

func (w *tuneWriter) flushReadings() {
	if w.n > 0 && !w.verbose && w.stage != "verify" {
		fmt.Fprintf(w.out, "             %d %s readings\n", w.n, w.stage)
	}
	w.n = 0
	w.stage = ""
}

func plotTune(path string, r *bench.Rig, f physic.Frequency, w *tuneWriter, res tune.Result) error {
	pts := append(append(plotter.XYs{}, w.coarse...), w.fine...)
	if len(pts) == 0 {
		return fmt.Errorf("plot: the tune took no readings")
	}
	// Show the neighbourhood of the chosen point: the fine sweep, or the coarse scan if
	// there was no fine sweep.
	focus := w.fine
	if len(focus) == 0 {
		focus = w.coarse
	}
	xmin, xmax := math.Inf(1), math.Inf(-1)
	for _, p := range focus {
		xmin, xmax = math.Min(xmin, p.X), math.Max(xmax, p.X)
	}
	pad := math.Max((xmax-xmin)*0.05, 2)
	xmin, xmax = xmin-pad, xmax+pad
	p := newSWRPlot(fmt.Sprintf("tankd tune at %v: %s, final SWR %.2f", f, res.Outcome, res.SWR), "motor position, steps", xmin, xmax)
	// The model's true curve, from the simulator: shaft = motor − play/2 on the way up.
	st := r.Station
	perTurn := st.Spec.StepsPerTurn()
	offset := float64(r.Axis.Position() - st.Mech.MotorPosition())
	half := st.Spec.ShaftLag()
	var truth, fitted plotter.XYs
	for i := range 600 {
		x := xmin + (xmax-xmin)*float64(i)/599
		shaft := (x - offset - half) / perTurn
		truth = append(truth, plotter.XY{X: x, Y: clipSWR(st.RF.SWR(bench.Hz(f), shaft, st.Temperature()))})
		if w.fit != nil {
			if g := w.fit.Gamma2At(x); !math.IsNaN(g) {
				fitted = append(fitted, plotter.XY{X: x, Y: clipSWR(sense.SWRFromGamma2(g))})
			}
		}
	}
	if err := addLine(p, "true SWR (simulator)", truth, colTrue, 2.5); err != nil {
		return err
	}
	if len(fitted) > 0 {
		if err := addLine(p, "fitted curve (measured)", fitted, colFit, 1.2); err != nil {
			return err
		}
	}
	inView := func(xys plotter.XYs) plotter.XYs {
		var out plotter.XYs
		for _, q := range xys {
			if q.X >= xmin && q.X <= xmax {
				out = append(out, q)
			}
		}
		return out
	}
	if err := addPoints(p, "coarse readings", inView(w.coarse), colCoarse, draw.BoxGlyph{}, 2.5); err != nil {
		return err
	}
	if err := addPoints(p, "fine readings", inView(w.fine), colFine, draw.CircleGlyph{}, 1.8); err != nil {
		return err
	}
	if err := addPoints(p, "chosen position", plotter.XYs{{X: float64(res.Pos), Y: clipSWR(res.SWR)}}, colChosen, draw.CrossGlyph{}, 5); err != nil {
		return err
	}
	return savePlot(p, path)
}

// plotReplay draws the recording (both directions), the controller's readings, its fitted
// curve and the chosen position.
func plotReplay(path string, samples []record.Sample, r *bench.ReplayRig, w *tuneWriter, res tune.Result) error {
	var up, down plotter.XYs
	for _, s := range samples {
		if s.Freq != r.Freq {
			continue
		}
		q := plotter.XY{X: float64(s.Step), Y: clipSWR(s.SWR)}
		if s.Dir == motion.Up {
			up = append(up, q)
		} else {
			down = append(down, q)
		}
	}
	xmin, xmax := float64(r.Best)-6*r.Width, float64(r.Best)+6*r.Width
	p := newSWRPlot(fmt.Sprintf("tankd on a recording at %v: %s, final SWR %.2f", r.Freq, res.Outcome, res.SWR), "motor position, steps", xmin, xmax)
	if err := addPoints(p, "recorded going up", up, colTrue, draw.CircleGlyph{}, 1.2); err != nil {
		return err
	}
	if err := addPoints(p, "recorded going down", down, colGuide, draw.CircleGlyph{}, 1.2); err != nil {
		return err
	}
	if w.fit != nil {
		var fitted plotter.XYs
		for i := range 600 {
			x := xmin + (xmax-xmin)*float64(i)/599
			if g := w.fit.Gamma2At(x); !math.IsNaN(g) {
				fitted = append(fitted, plotter.XY{X: x, Y: clipSWR(sense.SWRFromGamma2(g))})
			}
		}
		if err := addLine(p, "fitted curve", fitted, colFit, 1.2); err != nil {
			return err
		}
	}
	if err := addPoints(p, "controller's fine readings", w.fine, colFine, draw.CircleGlyph{}, 1.8); err != nil {
		return err
	}
	if err := addPoints(p, "chosen position", plotter.XYs{{X: float64(res.Pos), Y: clipSWR(res.SWR)}}, colChosen, draw.CrossGlyph{}, 5); err != nil {
		return err
	}
	return savePlot(p, path)
}

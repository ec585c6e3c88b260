package main

import (
	"bufio"
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"

	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim/bench"
)

// Ranges of the recording and replay flags. A sweep of a hundred half-widths either side, or a
// hundred readings in one, is far past any use; a drive's whole travel is some hundred thousand
// steps, so a prediction further off than that is off the capacitor (the demo station's
// 160,000 steps a capacitor turn).
var (
	sweepSpanRange = station.Range{Min: 0, MinOpen: true, Max: 100, Unit: "half-widths"}
	densityRange   = station.Range{Min: 0, MinOpen: true, Max: 100, Unit: "readings"}
	offsetRange    = station.Range{Min: -100000, Max: 100000, Unit: "steps"}
	sigmaRange     = station.Range{Min: 0, Max: 100000, Unit: "steps"}
)

func runRecord(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("record", stderr)
	nf := newNumFlags(fs)
	geo := addGeometryFlags(fs, nf)
	freq := nf.Float("freq", 3.75e6, station.FrequencyRange(), "frequency")
	seed := nf.Seed("seed", 1, "simulator `seed`")
	out := fs.String("o", "", "recording to write (default standard output)")
	span := nf.Float("span", 6, sweepSpanRange, "how far either side of the dip to sweep")
	density := nf.Float("density", 8, densityRange, "readings per half-width")
	fs.Usage = func() {
		fmt.Fprintln(stderr, `usage: tanksim record [flags]

Sweeps the simulated loop through the dip, upward then downward, reading the coupler on the
move, and writes a sweep recording (the format of controller/record) that tanksim replay and the
tests can play back.

flags:`)
		fs.PrintDefaults()
	}
	if err := nf.parse(args); err != nil {
		return err
	}
	s, err := geo.spec(fs)
	if err != nil {
		return err
	}
	s.Simulator.Seed = *seed
	r, err := bench.NewRig(bench.RigOptions{Truth: s})
	if err != nil {
		return err
	}
	ctx := context.Background()
	if !r.Axis.Trusted() {
		if res := r.Tuner.Home(ctx); res.Outcome != tune.Homed {
			return fmt.Errorf("homing: %s: %v", res.Outcome, res.Err)
		}
	}
	sw, err := bench.RecordSweep(ctx, r, hz(*freq), *span, *density)
	if err != nil {
		return err
	}
	w := stdout
	var f *os.File
	if *out != "" {
		if f, err = os.Create(*out); err != nil {
			return err
		}
		defer f.Close()
		w = f
	}
	bw := bufio.NewWriter(w)
	rw, err := record.NewWriter(bw, sw.Header)
	if err != nil {
		return err
	}
	for _, smp := range sw.Samples {
		if err := rw.Write(smp); err != nil {
			return err
		}
	}
	if err := rw.Flush(); err != nil {
		return err
	}
	if err := bw.Flush(); err != nil {
		return err
	}
	if f != nil {
		if err := f.Close(); err != nil {
			return err
		}
		fmt.Fprintf(stderr, "wrote %d samples to %s (dip at step %d)\n", len(sw.Samples), *out, sw.Best)
	}
	return nil
}

func runReplay(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("replay", stderr)
	nf := newNumFlags(fs)
	offset := nf.Float("offset", 5, offsetRange, "how far the memory map's prediction is off the recorded dip")
	sigma := nf.Float("sigma", 3, sigmaRange, "the prediction's one-sigma uncertainty")
	plotFile := fs.String("plot", "", "draw SWR against position to this .svg or .png file")
	verbose := fs.Bool("v", false, "print every reading")
	fs.Usage = func() {
		fmt.Fprintln(stderr, `usage: tanksim replay [flags] RECORDING

Runs the real controller against a sweep recording, which answers as the drive and the coupler,
and prints each stage.

flags:`)
		fs.PrintDefaults()
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return usageError{err}
	}
	if err := nf.check(); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return usageError{fmt.Errorf("want one recording file, have %d arguments", fs.NArg())}
	}
	f, err := os.Open(fs.Arg(0))
	if err != nil {
		return err
	}
	defer f.Close()
	h, samples, err := record.ReadAll(f)
	if err != nil {
		return fmt.Errorf("%s: %w", fs.Arg(0), err)
	}
	w := &tuneWriter{out: stdout, verbose: *verbose, on: true}
	r, err := bench.NewReplayRig(h, samples, *offset, *sigma, tune.ObserverFunc(w.observe))
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "%s: %d samples at %v, dip at step %d, half-width %.1f steps\n", fs.Arg(0), len(samples), r.Freq, r.Best, r.Width)
	res := r.Tune(context.Background())
	fmt.Fprintf(stdout, "\noutcome %s", res.Outcome)
	if res.Err != nil {
		fmt.Fprintf(stdout, " (%v)", res.Err)
	}
	fmt.Fprintf(stdout, " in %.3f s, RF %.3f s: final position %d against the recorded dip at %d; verified SWR %.3f\n",
		res.Duration().Seconds(), res.RFTime.Seconds(), res.Pos, r.Best, res.SWR)
	if *plotFile != "" {
		if err := plotReplay(*plotFile, samples, r, w, res); err != nil {
			return err
		}
		fmt.Fprintf(stdout, "wrote %s\n", *plotFile)
	}
	return nil
}

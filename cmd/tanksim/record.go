package main

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"os"

	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim/bench"
)

func runRecord(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("record", stderr)
	geo := addGeometryFlags(fs)
	freq := fs.Float64("freq", 3.75e6, "frequency, Hz")
	seed := fs.Uint64("seed", 1, "simulator seed")
	out := fs.String("o", "", "recording to write (default standard output)")
	span := fs.Float64("span", 6, "how far either side of the dip to sweep, in half-widths")
	density := fs.Float64("density", 8, "readings per half-width")
	fs.Usage = func() {
		fmt.Fprintln(stderr, `usage: tanksim record [flags]

Sweeps the simulated loop through the dip, upward then downward, reading the coupler on the
move, and writes a sweep recording (the format of controller/record) that tanksim replay and the
tests can play back.

flags:`)
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if !(*span > 0 && *span <= 100) || !(*density > 0 && *density <= 100) {
		return usageError{fmt.Errorf("-span %g, -density %g: want both in (0, 100]", *span, *density)}
	}
	s, err := geo.spec(fs)
	if err != nil {
		return err
	}
	s.Seed = *seed
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
	offset := fs.Float64("offset", 5, "how far (steps) the memory map's prediction is off the recorded dip")
	sigma := fs.Float64("sigma", 3, "the prediction's one-sigma uncertainty, steps")
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
		return usageError{err}
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

package main

import (
	"fmt"
	"io"
	"math"

	"gonum.org/v1/plot/plotter"

	"github.com/tankd/tankd/controller/station"
)

// widthRange is how far either side of the dip a curve may reach: a hundred bandwidths is
// far past where the SWR is worth drawing (common practice).
var widthRange = station.Range{Min: 0, MinOpen: true, Max: 100, Unit: "bandwidths"}

func runCurve(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("curve", stderr)
	nf := newNumFlags(fs)
	geo := addGeometryFlags(fs, nf)
	freq := nf.Float("freq", 3.75e6, station.FrequencyRange(), "operating frequency")
	against := fs.String("x", "step", "horizontal axis: step (SWR against motor step at -freq) or freq (SWR against frequency with the capacitor at -freq's dip)")
	width := nf.Float("width", 3, widthRange, "span either side of the dip, in loaded bandwidths")
	temp := nf.Float("temp", 20, temperatureRange, "temperature")
	out := fs.String("o", "curve.svg", "output file, .svg or .png")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: tanksim curve [flags]\n\nPlots the loop's true SWR (no coupler, no noise) around the dip.\n\nflags:")
		fs.PrintDefaults()
	}
	if err := nf.parse(args); err != nil {
		return err
	}
	s, err := geo.spec(fs)
	if err != nil {
		return err
	}
	rf, err := s.RF()
	if err != nil {
		return err
	}
	f0 := *freq
	turns, ok := rf.DipTurns(f0, *temp)
	if !ok {
		return fmt.Errorf("the capacitor cannot tune %.0f Hz", f0)
	}
	el := rf.Electrical(f0, 1, *temp)
	perTurn := s.StepsPerTurn()
	const n = 801
	var pts plotter.XYs
	var title, xLabel string
	var xmin, xmax float64
	switch *against {
	case "freq":
		span := *width * el.Bandwidth
		xmin, xmax = (f0-span)/1e3, (f0+span)/1e3
		for i := range n {
			f := f0 - span + 2*span*float64(i)/(n-1)
			pts = append(pts, plotter.XY{X: f / 1e3, Y: clipSWR(rf.SWR(f, turns, *temp))})
		}
		title = fmt.Sprintf("%s: SWR against frequency, tuned to %.3f kHz (Q_L %.0f, BW %.0f Hz)", s.Name, f0/1e3, el.QLoaded, el.Bandwidth)
		xLabel = "frequency, kHz"
	case "step":
		// The loaded bandwidth in capacitance: ΔC/C = 2Δf/f, turned into motor steps.
		c := el.Capacitance + el.Parallel
		dc := 2 * c * el.Bandwidth / f0
		span := math.Max(*width*dc/rf.Capacitor().Slope(turns)*perTurn, 10)
		centre := turns * perTurn
		xmin, xmax = centre-span, centre+span
		for i := range n {
			st := xmin + 2*span*float64(i)/(n-1)
			pts = append(pts, plotter.XY{X: st, Y: clipSWR(rf.SWR(f0, st/perTurn, *temp))})
		}
		title = fmt.Sprintf("%s: SWR against motor step at %.3f kHz (dip at step %.1f)", s.Name, f0/1e3, centre)
		xLabel = fmt.Sprintf("motor step (%.0f per capacitor turn)", perTurn)
	default:
		return usageError{fmt.Errorf("-x %q: want step or freq", *against)}
	}
	p := newSWRPlot(title, xLabel, xmin, xmax)
	if err := addLine(p, "true SWR", pts, colCoarse, 1.5); err != nil {
		return err
	}
	if err := savePlot(p, *out); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "wrote %s: %s\n", *out, title)
	fmt.Fprintln(stdout, caution)
	return nil
}

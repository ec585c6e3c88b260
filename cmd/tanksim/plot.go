package main

import (
	"fmt"
	"image/color"
	"math"
	"path/filepath"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// swrCeiling is where SWR plots are clipped: above it a loop is simply out of tune.
const swrCeiling = 10

// Plot colours: readable on white and for the common colour-vision deficiencies.
var (
	colTrue   = color.RGBA{R: 0x99, G: 0x99, B: 0x99, A: 0xff}
	colCoarse = color.RGBA{R: 0x00, G: 0x72, B: 0xb2, A: 0xff}
	colFine   = color.RGBA{R: 0xd5, G: 0x5e, B: 0x00, A: 0xff}
	colFit    = color.RGBA{R: 0x00, G: 0x9e, B: 0x73, A: 0xff}
	colChosen = color.RGBA{R: 0xcc, G: 0x00, B: 0x00, A: 0xff}
	colGuide  = color.RGBA{R: 0xcc, G: 0xcc, B: 0xcc, A: 0xff}
)

func clipSWR(s float64) float64 {
	if math.IsNaN(s) || s > swrCeiling {
		return swrCeiling
	}
	return s
}

// newSWRPlot starts an SWR plot with guide lines at SWR 1.5 and 2.
func newSWRPlot(title, xLabel string, xmin, xmax float64) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = xLabel
	p.Y.Label.Text = "SWR"
	p.Y.Min, p.Y.Max = 1, swrCeiling
	p.X.Min, p.X.Max = xmin, xmax
	p.Add(plotter.NewGrid())
	for _, s := range []float64{1.5, 2} {
		l, _ := plotter.NewLine(plotter.XYs{{X: xmin, Y: s}, {X: xmax, Y: s}})
		l.Color = colGuide
		l.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(l)
	}
	p.Legend.Top = false
	p.Legend.Left = true
	p.Legend.XOffs = vg.Points(8)
	p.Legend.YOffs = vg.Points(12)
	return p
}

func addLine(p *plot.Plot, name string, xys plotter.XYs, c color.Color, width float64) error {
	l, err := plotter.NewLine(xys)
	if err != nil {
		return err
	}
	l.Color = c
	l.Width = vg.Points(width)
	p.Add(l)
	if name != "" {
		p.Legend.Add(name, l)
	}
	return nil
}

func addPoints(p *plot.Plot, name string, xys plotter.XYs, c color.Color, shape draw.GlyphDrawer, radius float64) error {
	if len(xys) == 0 {
		return nil
	}
	s, err := plotter.NewScatter(xys)
	if err != nil {
		return err
	}
	s.Color = c
	s.Shape = shape
	s.Radius = vg.Points(radius)
	p.Add(s)
	if name != "" {
		p.Legend.Add(name, s)
	}
	return nil
}

// savePlot writes p to path as SVG or PNG, chosen by the file's extension.
func savePlot(p *plot.Plot, path string) error {
	ext := strings.ToLower(filepath.Ext(path))
	if ext != ".svg" && ext != ".png" {
		return usageError{fmt.Errorf("plot file %q: want a .svg or .png name", path)}
	}
	if err := p.Save(20*vg.Centimeter, 12*vg.Centimeter, path); err != nil {
		return fmt.Errorf("write plot: %w", err)
	}
	return nil
}

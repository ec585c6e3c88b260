package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/tankd/tankd/controller/band"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/bench"
	"github.com/tankd/tankd/sim/loop"
)

// designRow is one frequency of a design report; its JSON keys are the report's documented
// interface.
type designRow struct {
	Band         string  `json:"band,omitempty"`
	FrequencyHz  float64 `json:"frequency_hz"`
	InductanceH  float64 `json:"inductance_h"`
	CapacitanceF float64 `json:"capacitance_f"`
	QUnloaded    float64 `json:"q_unloaded"`
	QLoaded      float64 `json:"q_loaded"`
	BandwidthHz  float64 `json:"bandwidth_hz"`
	RRadOhm      float64 `json:"r_rad_ohm"`
	RLossOhm     float64 `json:"r_loss_ohm"`
	Efficiency   float64 `json:"efficiency"`
	EfficiencyDB float64 `json:"efficiency_db"`
	CapVoltageV  float64 `json:"cap_voltage_v"`      // rms
	CapVoltagePk float64 `json:"cap_voltage_peak_v"` // peak
	CurrentA     float64 `json:"current_a"`          // rms
	InRange      bool    `json:"capacitor_in_range"`
	SmallLoop    bool    `json:"small_loop_valid"`
}

type frequencyList struct {
	freqs []float64
}

func (l *frequencyList) String() string {
	parts := make([]string, len(l.freqs))
	for i, f := range l.freqs {
		parts[i] = strconv.FormatFloat(f, 'f', -1, 64)
	}
	return strings.Join(parts, ",")
}

func (l *frequencyList) Set(s string) error {
	for _, p := range strings.Split(s, ",") {
		p = strings.TrimSpace(p)
		if p == "" {
			continue
		}
		f, err := strconv.ParseFloat(p, 64)
		if err != nil || !(f > 0) || f > 1e9 {
			return fmt.Errorf("frequency %q: want a frequency in Hz, e.g. 3750000", p)
		}
		l.freqs = append(l.freqs, f)
	}
	return nil
}

// geometryFlags adds the loop-shape flags shared by the commands that take a loop, applied over
// the station description named by -config.
type geometryFlags struct {
	config                              string
	turns                               int
	diameter, conductor, spacing, stray float64
	esr                                 float64
	capMin, capMax                      float64
	set                                 map[string]bool
}

func addGeometryFlags(fs *flag.FlagSet) *geometryFlags {
	g := &geometryFlags{}
	fs.StringVar(&g.config, "config", "", "station description (TOML); default: the built-in demo station")
	fs.IntVar(&g.turns, "turns", 0, "number of turns, 1–4")
	fs.Float64Var(&g.diameter, "diameter", 0, "turn diameter, m")
	fs.Float64Var(&g.conductor, "conductor", 0, "conductor outside diameter, m")
	fs.Float64Var(&g.spacing, "spacing", 0, "centre-to-centre turn spacing, m")
	fs.Float64Var(&g.stray, "stray", 0, "stray capacitance across the capacitor, pF")
	fs.Float64Var(&g.esr, "esr", 0, "extra series loss (capacitor ESR, joints), Ω; -esr 0 leaves conductor and radiation loss only")
	fs.Float64Var(&g.capMin, "cmin", 0, "tuning capacitor minimum, pF")
	fs.Float64Var(&g.capMax, "cmax", 0, "tuning capacitor maximum, pF")
	return g
}

// spec loads the description and applies the flags that were given.
func (g *geometryFlags) spec(fs *flag.FlagSet) (sim.Spec, error) {
	s := sim.DefaultSpec()
	if g.config != "" {
		var err error
		if s, err = sim.LoadSpec(g.config); err != nil {
			return s, err
		}
	}
	fs.Visit(func(f *flag.Flag) {
		switch f.Name {
		case "turns":
			s.Loop.Turns = g.turns
		case "diameter":
			s.Loop.DiameterM = g.diameter
		case "conductor":
			s.Loop.ConductorM = g.conductor
		case "spacing":
			s.Loop.SpacingM = g.spacing
		case "stray":
			s.Loop.StrayPF = g.stray
		case "esr":
			s.Loop.ExtraLossOhm, s.Loop.CapacitorQ, s.Loop.GroundOhm = g.esr, 0, 0
		case "cmin":
			s.Capacitor.MinPF = g.capMin
			s.Capacitor.Table = nil
		case "cmax":
			s.Capacitor.MaxPF = g.capMax
			s.Capacitor.Table = nil
		}
	})
	if err := s.Validate(); err != nil {
		return s, usageError{err}
	}
	return s, nil
}

func runDesign(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("design", stderr)
	geo := addGeometryFlags(fs)
	var freqs frequencyList
	fs.Var(&freqs, "freq", "frequencies to report, Hz, comma-separated")
	bands := fs.String("band", "", "bands to report at their edges and centre, e.g. 160m,80m (default 160m,80m,40m without -freq)")
	power := fs.Float64("power", 100, "transmitter power delivered to the loop, W")
	temp := fs.Float64("temp", 20, "conductor temperature, °C")
	asJSON := fs.Bool("json", false, "print a JSON array, one object per frequency")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: tanksim design [flags]\n\nElectrical design of a small transmitting loop. Geometry and capacitor come from -config\n(a station description) and the flags given, which override it.\n\nflags:")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if !(*power > 0) || *power > 10000 {
		return usageError{fmt.Errorf("-power %g: want more than 0 and at most 10000 W", *power)}
	}
	if *temp < -50 || *temp > 100 {
		return usageError{fmt.Errorf("-temp %g: want −50 to 100 °C", *temp)}
	}
	s, err := geo.spec(fs)
	if err != nil {
		return err
	}
	type point struct {
		band string
		f    float64
	}
	var points []point
	for _, f := range freqs.freqs {
		b, _ := band.Of(hz(f))
		points = append(points, point{b.Name, f})
	}
	if *bands == "" && len(points) == 0 {
		*bands = "160m,80m,40m"
	}
	var bandList []band.Band
	for _, name := range strings.Split(*bands, ",") {
		if strings.TrimSpace(name) == "" {
			continue
		}
		b, err := band.Named(name)
		if err != nil {
			return usageError{err}
		}
		bandList = append(bandList, b)
		for _, f := range []float64{bench.Hz(b.Low), bench.Hz(b.Centre()), bench.Hz(b.High)} {
			points = append(points, point{b.Name, f})
		}
	}
	rf, err := s.RF()
	if err != nil {
		return err
	}
	capOpts := rf.Capacitor().Options()
	rows := make([]designRow, len(points))
	for i, p := range points {
		e := rf.Electrical(p.f, *power, *temp)
		rows[i] = rowOf(p.band, e, e.Capacitance >= capOpts.Min && e.Capacitance <= capOpts.Max, s.Model().SmallLoopLimit(p.f))
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(rows); err != nil {
			return err
		}
		fmt.Fprintln(stderr, caution)
		return nil
	}
	printDesign(stdout, s, rf.Model(), capOpts.Min, capOpts.Max, rows, bandList, *power, *temp)
	fmt.Fprintln(stdout)
	fmt.Fprintln(stdout, caution)
	return nil
}

func rowOf(bandName string, e loop.Electrical, inRange, small bool) designRow {
	return designRow{
		Band: bandName, FrequencyHz: e.Frequency, InductanceH: e.Inductance, CapacitanceF: e.Capacitance,
		QUnloaded: e.QUnloaded, QLoaded: e.QLoaded, BandwidthHz: e.Bandwidth, RRadOhm: e.RRad,
		RLossOhm: e.RLoss, Efficiency: e.Efficiency, EfficiencyDB: e.EfficiencyDB(),
		CapVoltageV: e.VoltageRMS, CapVoltagePk: e.VoltagePeak, CurrentA: e.Current,
		InRange: inRange, SmallLoop: small,
	}
}

func printDesign(w io.Writer, s sim.Spec, m loop.Model, cmin, cmax float64, rows []designRow, bands []band.Band, power, temp float64) {
	g := m.Geometry
	fmt.Fprintf(w, "Loop: %d turn(s) of %.3f m diameter, %.1f mm conductor", g.Turns, g.Diameter, g.ConductorDiameter*1000)
	if g.Turns > 1 {
		fmt.Fprintf(w, ", %.0f mm apart", g.Spacing*1000)
	}
	fmt.Fprintf(w, " (%.2f m of conductor)\n", g.ConductorLength())
	fmt.Fprintf(w, "Inductance %.3f µH at %.0f °C; capacitor %.0f–%.0f pF plus %.0f pF stray; %g W\n\n",
		m.InductanceAt(temp)*1e6, temp, cmin*1e12, cmax*1e12, m.Stray*1e12, power)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "band\tMHz\tC pF\tQu\tQl\tBW Hz\tRrad mΩ\tRloss mΩ\teff %\teff dB\tVcap rms\tVcap pk\tI A\t")
	for _, r := range rows {
		note := ""
		if !r.InRange {
			note = "capacitor out of range"
		}
		if !r.SmallLoop {
			note = strings.TrimPrefix(note+"; loop not small against λ", "; ")
		}
		fmt.Fprintf(tw, "%s\t%.4f\t%.1f\t%.0f\t%.0f\t%.0f\t%.2f\t%.1f\t%.1f\t%.1f\t%.0f\t%.0f\t%.1f\t %s\n",
			r.Band, r.FrequencyHz/1e6, r.CapacitanceF*1e12, r.QUnloaded, r.QLoaded, r.BandwidthHz,
			r.RRadOhm*1e3, r.RLossOhm*1e3, r.Efficiency*100, r.EfficiencyDB, r.CapVoltageV, r.CapVoltagePk, r.CurrentA, note)
	}
	tw.Flush()
	if len(bands) > 0 {
		fmt.Fprintln(w)
	}
	for _, b := range bands {
		var need []float64
		for _, r := range rows {
			if r.Band == b.Name {
				need = append(need, r.CapacitanceF)
			}
		}
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, c := range need {
			lo, hi = math.Min(lo, c), math.Max(hi, c)
		}
		switch {
		case lo >= cmin && hi <= cmax:
			fmt.Fprintf(w, "%-5s covered: needs %.1f–%.1f pF\n", b.Name, lo*1e12, hi*1e12)
		case hi < cmin:
			fmt.Fprintf(w, "%-5s NOT covered: needs %.1f–%.1f pF, below the capacitor's %.1f pF minimum\n", b.Name, lo*1e12, hi*1e12, cmin*1e12)
		case lo > cmax:
			fmt.Fprintf(w, "%-5s NOT covered: needs %.1f–%.1f pF, above the capacitor's %.0f pF maximum\n", b.Name, lo*1e12, hi*1e12, cmax*1e12)
		default:
			fmt.Fprintf(w, "%-5s partly covered: needs %.1f–%.1f pF, the capacitor spans %.1f–%.0f pF\n", b.Name, lo*1e12, hi*1e12, cmin*1e12, cmax*1e12)
		}
	}
	fmt.Fprintln(w, "\nVcap is the circuit-law capacitor voltage, V = X_L·√(P/R); forms using the loaded Q give √2 less.")
}

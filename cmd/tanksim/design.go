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
	"github.com/tankd/tankd/controller/physics/loop"
	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/bench"
)

// designRow is one frequency of a design report; its JSON keys are the report's documented
// interface. A frequency the loop cannot be tuned to, or where the small-loop model means
// nothing, has Covered false, a Reason, and null for every figure the model cannot give there.
type designRow struct {
	Band         string   `json:"band,omitempty"`
	FrequencyHz  float64  `json:"frequency_hz"`
	InductanceH  float64  `json:"inductance_h"`
	CapacitanceF *float64 `json:"capacitance_f"`
	QUnloaded    *float64 `json:"q_unloaded"`
	QLoaded      *float64 `json:"q_loaded"`
	BandwidthHz  *float64 `json:"bandwidth_hz"`
	RRadOhm      *float64 `json:"r_rad_ohm"`
	RLossOhm     *float64 `json:"r_loss_ohm"`
	Efficiency   *float64 `json:"efficiency"`
	EfficiencyDB *float64 `json:"efficiency_db"`
	CapVoltageV  *float64 `json:"cap_voltage_v"`      // rms
	CapVoltagePk *float64 `json:"cap_voltage_peak_v"` // peak
	CurrentA     *float64 `json:"current_a"`          // rms
	InRange      bool     `json:"capacitor_in_range"`
	SmallLoop    bool     `json:"small_loop_valid"`
	// SelfCapacitanceF is the winding's own capacitance across the capacitor (the leads'
	// stray is besides it).
	SelfCapacitanceF float64 `json:"self_capacitance_f"`
	// CircumferenceWL is the turn circumference in wavelengths.
	CircumferenceWL float64 `json:"circumference_wavelengths"`
	Covered         bool    `json:"covered"`
	Reason          string  `json:"reason,omitempty"`
	// Note qualifies a covered row's figures where the small-loop model is less than exact.
	Note string `json:"note,omitempty"`

	e loop.Electrical // the model's figures, for the text report of a covered row
}

// How far the small-loop model holds (common practice): its figures are good while the turn
// circumference is under a tenth of the wavelength, rough up to a quarter, and beyond that mean
// nothing, for the current along the conductor is far from uniform.
const (
	smallLoopWavelengths  = 0.1
	modelLimitWavelengths = 0.25
)

// radiationNoteWavelengths is where the report starts saying that the small-loop radiation
// resistance, R = 20π²·(C/λ)⁴·N², reads low, and the efficiency with it: the current along a
// loop of a twentieth of a wavelength and more is no longer quite uniform. A full-wave thin-wire
// method-of-moments solution of one- and two-turn loops put the formula about 1 % low at λ/20,
// 3 % at 0.075 λ and 5–6 % at λ/10 (our own computation; no published source at hand).
const radiationNoteWavelengths = 0.05

// frequencyList is a flag of comma-separated frequencies (numFlags.Frequencies).
type frequencyList struct {
	name  string
	freqs []float64
}

func (l *frequencyList) String() string {
	if l == nil {
		return ""
	}
	parts := make([]string, len(l.freqs))
	for i, f := range l.freqs {
		parts[i] = strconv.FormatFloat(f, 'f', -1, 64)
	}
	return strings.Join(parts, ",")
}

// Set implements flag.Value: it reads the numbers and leaves their range to check.
func (l *frequencyList) Set(s string) error {
	for _, p := range strings.Split(s, ",") {
		p = strings.TrimSpace(p)
		if p == "" {
			continue
		}
		f, err := strconv.ParseFloat(p, 64)
		if err != nil {
			return fmt.Errorf("frequency %q: want a frequency in Hz, e.g. 3750000, %s", p, station.FrequencyRange())
		}
		l.freqs = append(l.freqs, f)
	}
	return nil
}

// geometryFlag is a loop-shape flag and the station description's key it sets.
type geometryFlag struct {
	name, key, usage string
}

func geometryFlagKeys() []geometryFlag {
	return []geometryFlag{
		{"turns", "loop.turns", "number of `turns`"},
		{"diameter", "loop.diameter_m", "turn diameter"},
		{"conductor", "loop.conductor_m", "conductor outside diameter"},
		{"spacing", "loop.spacing_m", "centre-to-centre turn spacing"},
		{"stray", "loop.stray_pf", "stray capacitance across the capacitor besides the winding's own: leads, fittings"},
		{"esr", "loop.extra_loss_ohm", "extra series loss (capacitor ESR, joints; 0 leaves conductor and radiation loss only)"},
		{"cmin", "capacitor.min_pf", "tuning capacitor minimum"},
		{"cmax", "capacitor.max_pf", "tuning capacitor maximum"},
	}
}

// geometryFlags adds the loop-shape flags shared by the commands that take a loop, applied over
// the station description named by -config. Each takes its key's range from the description.
type geometryFlags struct {
	config string
	turns  *int
	floats map[string]*float64 // by flag name
}

func addGeometryFlags(fs *flag.FlagSet, nf *numFlags) *geometryFlags {
	g := &geometryFlags{floats: map[string]*float64{}}
	fs.StringVar(&g.config, "config", "", "station description (TOML); default: the built-in demo station")
	for _, gf := range geometryFlagKeys() {
		r, _ := station.KeyRange(gf.key) // every key has one: TestGeometryFlagsTakeTheirKeysRanges
		if gf.name == "turns" {
			g.turns = nf.Int(gf.name, 0, r, gf.usage)
			continue
		}
		g.floats[gf.name] = nf.Float(gf.name, 0, r, gf.usage)
	}
	return g
}

// spec loads the station file (the built-in demo station without -config) and applies the
// flags that were given to its description.
func (g *geometryFlags) spec(fs *flag.FlagSet) (sim.Spec, error) {
	s := sim.DefaultSpec()
	if g.config != "" {
		var err error
		if s, err = sim.LoadSpec(g.config); err != nil {
			return s, err
		}
	}
	g.apply(fs, &s.Description)
	if err := s.Validate(); err != nil {
		return s, usageError{err}
	}
	return s, nil
}

// description is the station's description alone, for the design calculator: the station file's
// description (its [simulator] section, if any, is read and checked but not used) with the
// flags that were given applied.
func (g *geometryFlags) description(fs *flag.FlagSet) (station.Description, error) {
	d := station.DefaultDescription()
	if g.config != "" {
		s, err := sim.LoadSpec(g.config)
		if err != nil {
			return d, err
		}
		d = s.Description
	}
	g.apply(fs, &d)
	if err := d.Validate(); err != nil {
		return d, usageError{err}
	}
	return d, nil
}

// apply sets the keys of the flags that were given.
func (g *geometryFlags) apply(fs *flag.FlagSet, d *station.Description) {
	fs.Visit(func(f *flag.Flag) {
		switch f.Name {
		case "turns":
			d.Loop.Turns = *g.turns
		case "diameter":
			d.Loop.DiameterM = *g.floats[f.Name]
		case "conductor":
			d.Loop.ConductorM = *g.floats[f.Name]
		case "spacing":
			d.Loop.SpacingM = *g.floats[f.Name]
		case "stray":
			d.Loop.StrayPF = *g.floats[f.Name]
		case "esr":
			d.Loop.ExtraLossOhm, d.Loop.CapacitorQ, d.Loop.GroundOhm = *g.floats[f.Name], 0, 0
		case "cmin":
			d.Capacitor.MinPF = *g.floats[f.Name]
			d.Capacitor.Table = nil
		case "cmax":
			d.Capacitor.MaxPF = *g.floats[f.Name]
			d.Capacitor.Table = nil
		}
	})
}

// Ranges of the design calculator's own flags. Ten kilowatts is above every amateur licence's
// limit; −50 to 100 °C runs from the coldest winter night to copper in summer sun carrying
// kilowatts (both from memory).
var (
	powerRange       = station.Range{Min: 0, MinOpen: true, Max: 10000, Unit: "W"}
	temperatureRange = station.Range{Min: -50, Max: 100, Unit: "°C"}
)

func runDesign(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("design", stderr)
	nf := newNumFlags(fs)
	geo := addGeometryFlags(fs, nf)
	freqs := nf.Frequencies("freq", "frequencies to report in `Hz`, comma-separated, each "+station.FrequencyRange().String())
	bands := fs.String("band", "", "bands to report at their edges and centre, e.g. 160m,80m (default 160m,80m,40m without -freq)")
	power := nf.Float("power", 100, powerRange, "transmitter power delivered to the loop")
	temp := nf.Float("temp", 20, temperatureRange, "conductor temperature")
	asJSON := fs.Bool("json", false, "print a JSON array, one object per frequency")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: tanksim design [flags]\n\nElectrical design of a small transmitting loop. Geometry and capacitor come from -config\n(a station description) and the flags given, which override it.\n\nflags:")
		fs.PrintDefaults()
	}
	if err := nf.parse(args); err != nil {
		return err
	}
	d, err := geo.description(fs)
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
	m := d.Model()
	c, err := d.CapacitorModel()
	if err != nil {
		return err
	}
	capOpts := c.Options()
	rows := make([]designRow, len(points))
	for i, p := range points {
		rows[i] = rowOf(p.band, m.At(p.f, *power, *temp), m, capOpts.Min, capOpts.Max)
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
	printDesign(stdout, m, capOpts.Min, capOpts.Max, rows, bandList, *power, *temp)
	fmt.Fprintln(stdout)
	fmt.Fprintln(stdout, caution)
	return nil
}

// rowOf judges one frequency: covered, with the model's figures, when the loop is small enough
// for the model there and the capacitor reaches the capacitance it needs; otherwise not
// covered, with the reason and only the figures that still mean something.
func rowOf(bandName string, e loop.Electrical, m loop.Model, cmin, cmax float64) designRow {
	r := designRow{Band: bandName, FrequencyHz: e.Frequency, InductanceH: e.Inductance, e: e}
	r.SelfCapacitanceF = e.Parallel - m.Stray
	r.CircumferenceWL = math.Pi * m.Geometry.Diameter * e.Frequency / loop.LightSpeed
	r.SmallLoop = r.CircumferenceWL < smallLoopWavelengths
	c := e.Capacitance
	figures := []float64{e.Capacitance, e.QUnloaded, e.QLoaded, e.Bandwidth, e.RRad, e.RLoss, e.Efficiency,
		e.EfficiencyDB(), e.VoltageRMS, e.VoltagePeak, e.Current}
	switch {
	case !(r.CircumferenceWL <= modelLimitWavelengths):
		r.Reason = fmt.Sprintf("the loop is too large for the small-loop model here (turn circumference %.2f λ, above λ/4)", r.CircumferenceWL)
	case !allFinite(figures):
		r.Reason = "the model gives no finite figures here"
	case c+e.Parallel < r.SelfCapacitanceF:
		r.Reason = fmt.Sprintf("needs %s pF in all, less than the winding's own %s pF: the loop is past its self-resonance",
			fmtPF((c+e.Parallel)*1e12), fmtPF(r.SelfCapacitanceF*1e12))
	case c < 0:
		r.Reason = fmt.Sprintf("needs %s pF in all, less than the %s pF across the capacitor already (the winding's own and the stray)",
			fmtPF((c+e.Parallel)*1e12), fmtPF(e.Parallel*1e12))
	case c < cmin:
		r.CapacitanceF = &c
		r.Reason = fmt.Sprintf("needs %s pF, below the capacitor's %s pF minimum", fmtPF(c*1e12), fmtPF(cmin*1e12))
	case c > cmax:
		r.CapacitanceF = &c
		r.Reason = fmt.Sprintf("needs %s pF, above the capacitor's %s pF maximum", fmtPF(c*1e12), fmtPF(cmax*1e12))
	default:
		r.Covered, r.InRange = true, true
		f := append([]float64(nil), figures...) // the row's own copies
		r.CapacitanceF, r.QUnloaded, r.QLoaded, r.BandwidthHz, r.RRadOhm, r.RLossOhm = &f[0], &f[1], &f[2], &f[3], &f[4], &f[5]
		r.Efficiency, r.EfficiencyDB, r.CapVoltageV, r.CapVoltagePk, r.CurrentA = &f[6], &f[7], &f[8], &f[9], &f[10]
		switch {
		case !r.SmallLoop:
			r.Note = fmt.Sprintf("loop not small against λ (turn circumference %.2f λ): figures approximate", r.CircumferenceWL)
		case r.CircumferenceWL >= radiationNoteWavelengths:
			r.Note = fmt.Sprintf("turn circumference %.3f λ: Rrad and eff. read a few %% low", r.CircumferenceWL)
		}
	}
	return r
}

func allFinite(xs []float64) bool {
	for _, x := range xs {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return false
		}
	}
	return true
}

// fmtPF writes a capacitance in pF to a tenth, with thousands grouped from 1,000 pF: 4.2, 10,
// 366.9, 2,300.
func fmtPF(pf float64) string {
	if math.Abs(pf) < 1000 {
		return strconv.FormatFloat(math.Round(pf*10)/10, 'f', -1, 64)
	}
	s := strconv.FormatFloat(math.Abs(math.Round(pf)), 'f', 0, 64)
	var b strings.Builder
	if pf < 0 {
		b.WriteByte('-')
	}
	for i, d := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(d)
	}
	return b.String()
}

func printDesign(w io.Writer, m loop.Model, cmin, cmax float64, rows []designRow, bands []band.Band, power, temp float64) {
	g := m.Geometry
	fmt.Fprintf(w, "Loop: %d turn(s) of %.3f m diameter, %.1f mm conductor", g.Turns, g.Diameter, g.ConductorDiameter*1000)
	if g.Turns > 1 {
		fmt.Fprintf(w, ", %.0f mm apart", g.Spacing*1000)
	}
	fmt.Fprintf(w, " (%.2f m of conductor)\n", g.ConductorLength())
	l, parallel := m.InductanceAt(temp), m.ParallelAt(temp)
	fmt.Fprintf(w, "Inductance %.3f µH and the winding's own capacitance %.1f pF at %.0f °C: self-resonant near %.1f MHz with the stray\n",
		l*1e6, (parallel-m.Stray)*1e12, temp, 1/(2*math.Pi*math.Sqrt(l*parallel))/1e6)
	fmt.Fprintf(w, "Capacitor %.0f–%.0f pF plus %.0f pF stray (leads, fittings); %g W\n\n", cmin*1e12, cmax*1e12, m.Stray*1e12, power)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "band\tMHz\tC pF\tQu\tQl\tBW Hz\tRrad mΩ\tRloss mΩ\teff %\teff dB\tVcap rms\tVcap pk\tI A\t")
	for _, r := range rows {
		if !r.Covered {
			// No figures where the model has no answer; the needed capacitance where it has one.
			c := "–"
			if r.CapacitanceF != nil {
				c = fmt.Sprintf("%.1f", *r.CapacitanceF*1e12)
			}
			fmt.Fprintf(tw, "%s\t%.4f\t%s\t%s not covered: %s\n", r.Band, r.FrequencyHz/1e6, c, strings.Repeat("–\t", 10), r.Reason)
			continue
		}
		e, note := r.e, r.Note
		fmt.Fprintf(tw, "%s\t%.4f\t%.1f\t%.0f\t%.0f\t%.0f\t%.2f\t%.1f\t%.1f\t%.1f\t%.0f\t%.0f\t%.1f\t %s\n",
			r.Band, r.FrequencyHz/1e6, e.Capacitance*1e12, e.QUnloaded, e.QLoaded, e.Bandwidth,
			e.RRad*1e3, e.RLoss*1e3, e.Efficiency*100, e.EfficiencyDB(), e.VoltageRMS, e.VoltagePeak, e.Current, note)
	}
	tw.Flush()
	if len(bands) > 0 {
		fmt.Fprintln(w)
	}
	for _, b := range bands {
		fmt.Fprintf(w, "%-5s %s\n", b.Name, coverage(b, rows, cmin, cmax, parallel))
	}
	fmt.Fprintln(w, "\nVcap is the circuit-law capacitor voltage, V = X_L·√(P/R); forms using the loaded Q give √2 less.")
}

// coverage says whether the capacitor covers band b, from the rows of the band; parallel is the
// capacitance across the capacitor besides its own (the winding's and the stray).
func coverage(b band.Band, rows []designRow, cmin, cmax, parallel float64) string {
	lo, hi := math.Inf(1), math.Inf(-1)
	n, large := 0, []designRow(nil)
	for _, r := range rows {
		if r.Band != b.Name {
			continue
		}
		n++
		if !(r.CircumferenceWL <= modelLimitWavelengths) {
			large = append(large, r)
			continue
		}
		lo, hi = math.Min(lo, r.e.Capacitance), math.Max(hi, r.e.Capacitance)
	}
	switch {
	case len(large) == n:
		return fmt.Sprintf("NOT covered: the loop is too large for the small-loop model on this band (turn circumference up to %.2f λ, above λ/4)",
			large[len(large)-1].CircumferenceWL)
	case len(large) > 0:
		return fmt.Sprintf("partly covered: the loop is too large for the small-loop model from %.4f MHz (turn circumference %.2f λ, above λ/4)",
			large[0].FrequencyHz/1e6, large[0].CircumferenceWL)
	}
	// Below what is across the capacitor already the tuning capacitance "needed" is negative:
	// say the totals instead.
	need := fmt.Sprintf("needs %.1f–%.1f pF", lo*1e12, hi*1e12)
	if lo < 0 {
		need = fmt.Sprintf("needs %.1f–%.1f pF in all, the winding's own and the stray included", (lo+parallel)*1e12, (hi+parallel)*1e12)
	}
	switch {
	case lo >= cmin && hi <= cmax:
		return fmt.Sprintf("covered: %s", need)
	case hi < cmin && lo < 0:
		return fmt.Sprintf("NOT covered: %s, below the capacitor's %.1f pF minimum plus the %.1f pF across it already", need, cmin*1e12, parallel*1e12)
	case hi < cmin:
		return fmt.Sprintf("NOT covered: %s, below the capacitor's %.1f pF minimum", need, cmin*1e12)
	case lo > cmax:
		return fmt.Sprintf("NOT covered: %s, above the capacitor's %.0f pF maximum", need, cmax*1e12)
	}
	return fmt.Sprintf("partly covered: %s, the capacitor spans %.1f–%.0f pF", need, cmin*1e12, cmax*1e12)
}

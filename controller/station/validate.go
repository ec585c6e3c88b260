package station

import (
	"errors"
	"fmt"
	"math"
	"reflect"
	"strconv"
	"strings"

	"github.com/tankd/tankd/controller/physics/capacitor"
	"github.com/tankd/tankd/controller/sense"
)

// Validate reports every problem at once, each with its key and the accepted range, as
// "loop.turns: 0: want 1 to 8". Every numeric key is first checked against its range
// (KeyRange); then the cross-key rules and the parts' own validation run for each section whose
// keys are all in range (for a section with a bad key they would only report it again in other
// words). The result joins one error per problem (errors.Join), so that a caller can prefix
// each with where the description sits in a larger file.
func (d Description) Validate() error {
	errs, bad := CheckKeys(d, "", KeyRange)
	add := func(key string, err error) {
		for _, e := range unjoin(err) {
			errs = append(errs, fmt.Errorf("%s: %w", key, e))
		}
	}
	for i, p := range d.Capacitor.Table {
		for j, col := range [2]string{"fraction", "pf"} {
			if err := tableRange(j).Check(p[j]); err != nil {
				bad["capacitor"] = true
				add("capacitor.table", fmt.Errorf("point %d: %s %w", i+1, col, err))
			}
		}
	}
	if _, err := capacitor.ParseTravel(d.Capacitor.Travel); err != nil {
		bad["capacitor"] = true
		add("capacitor.travel", fmt.Errorf("%q: want %s or %s", d.Capacitor.Travel, capacitor.Free, capacitor.Stops))
	}
	if _, err := sense.ParseLaw(d.Coupler.Detector); err != nil {
		bad["coupler"] = true
		add("coupler.detector", fmt.Errorf("%q: want %s or %s", d.Coupler.Detector, sense.LogLinear, sense.SquareLaw))
	}
	if !bad["loop"] {
		add("loop", d.Model().Validate())
	}
	if !bad["feed"] {
		add("feed", d.FeedModel().Validate())
	}
	if !bad["capacitor"] {
		c := d.Capacitor
		if len(c.Table) == 0 && !(c.MinPF < c.MaxPF) {
			add("capacitor.max_pf", fmt.Errorf("%s: want more than min_pf (%s)", formatNumber(c.MaxPF), formatNumber(c.MinPF)))
		} else if _, err := d.CapacitorModel(); err != nil {
			add("capacitor", err)
		}
	}
	if h := d.Drive.Home; h != nil && !bad["drive"] && !bad["capacitor"] && h.AtTurns > d.Capacitor.SpanTurns {
		add("drive.home.at_turns", fmt.Errorf("%s: want at most the capacitor's span_turns (%s)", formatNumber(h.AtTurns), formatNumber(d.Capacitor.SpanTurns)))
	}
	if !bad["coupler"] {
		// Both detectors follow the one law: check it once.
		if det, err := d.detector(); err != nil {
			add("coupler", err)
		} else {
			add("coupler", det.Validate())
		}
	}
	return errors.Join(errs...)
}

// unjoin flattens an error made by errors.Join (at any depth) into its parts.
func unjoin(err error) []error {
	if err == nil {
		return nil
	}
	j, ok := err.(interface{ Unwrap() []error })
	if !ok {
		return []error{err}
	}
	var out []error
	for _, e := range j.Unwrap() {
		out = append(out, unjoin(e)...)
	}
	return out
}

// Range is the accepted range of a numeric value: Min to Max inclusive, or more than Min and at
// most Max when MinOpen; both are finite. When Zero is set, 0 is accepted too and selects what
// Zero names (copper, an estimate, a lossless part). NaN and the infinities are never in a range.
type Range struct {
	Min, Max float64
	MinOpen  bool
	Zero     string
	Unit     string
	Hint     string // an easier reading of the range, e.g. "100 kHz to 60 MHz"
}

// Contains reports whether v is in r.
func (r Range) Contains(v float64) bool {
	if r.Zero != "" && v == 0 {
		return true
	}
	if r.MinOpen {
		return v > r.Min && v <= r.Max
	}
	return v >= r.Min && v <= r.Max // false for NaN; ±Inf lie outside every finite range
}

// String says the range as the errors put it, e.g. "0.1 to 20 m" or "0 (copper) or 1e-09 to
// 1e-05 Ω·m".
func (r Range) String() string {
	var b strings.Builder
	if r.Zero != "" {
		fmt.Fprintf(&b, "0 (%s) or ", r.Zero)
	}
	if r.MinOpen {
		fmt.Fprintf(&b, "more than %s and at most %s", formatNumber(r.Min), formatNumber(r.Max))
	} else {
		fmt.Fprintf(&b, "%s to %s", formatNumber(r.Min), formatNumber(r.Max))
	}
	if r.Unit != "" {
		b.WriteString(" " + r.Unit)
	}
	if r.Hint != "" {
		b.WriteString(" (" + r.Hint + ")")
	}
	return b.String()
}

// Check returns nil for a value in r, otherwise an error such as "NaN: want 0.1 to 20 m".
func (r Range) Check(v float64) error {
	if r.Contains(v) {
		return nil
	}
	return fmt.Errorf("%s: want %s", formatNumber(v), r)
}

// formatNumber writes v plainly where that stays short (0.022, 60000000) and in exponent form
// otherwise (1e-05, 1e+09).
func formatNumber(v float64) string {
	if a := math.Abs(v); v == 0 || a >= 1e-4 && a < 1e9 {
		return strconv.FormatFloat(v, 'f', -1, 64)
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

// FrequencyRange is the accepted range of every frequency a station description or a tool
// takes: from the 2200 m band (136 kHz) to the 6 m band (54 MHz), with a little room (from
// memory). Above it a loop of any usable size is no longer small against the wavelength, and
// the small-loop model means nothing.
func FrequencyRange() Range {
	return Range{Min: 100e3, Max: 60e6, Unit: "Hz", Hint: "100 kHz to 60 MHz"}
}

// KeyRange returns the accepted range of the numeric key (e.g. "loop.diameter_m",
// "drive.home.at_turns") of a station description; ok is false for a key that has none.
// The ranges are generous: they reject what no real build has, not what is merely unusual.
// Cross-key rules (min below max, a conductor thinner than a tenth of the turn diameter, ...)
// are the parts' own and are checked by Validate.
func KeyRange(key string) (r Range, ok bool) {
	r, ok = keyRanges()[key]
	return r, ok
}

func keyRanges() map[string]Range {
	return map[string]Range{
		// One to four turns is usual, a few small loops have more; transmitting loops are built
		// from about 0.3 m to 5 m across of 6 mm to 100 mm tube (common practice). The bounds
		// are wider still; whether the loop is small against the wavelength is a question of
		// frequency, which the design calculator answers per frequency.
		"loop.turns":       {Min: 1, Max: 8},
		"loop.diameter_m":  {Min: 0.1, Max: 20, Unit: "m"},
		"loop.conductor_m": {Min: 0.0005, Max: 0.2, Unit: "m"},
		"loop.spacing_m":   {Min: 0, Max: 2, Unit: "m"},
		// Silver 1.6e-8 to stainless steel 7e-7 Ω·m (CRC Handbook of Chemistry and Physics,
		// from memory), with room either side.
		"loop.resistivity_ohm_m": {Min: 1e-9, Max: 1e-5, Zero: "copper", Unit: "Ω·m"},
		"loop.temp_coeff_per_k":  {Min: 0, Max: 0.02, Unit: "/K"},
		"loop.expansion_per_k":   {Min: 0, Max: 1e-4, Unit: "/K"},
		// A loop's own loss is tens of milliohms; a hundred ohms is a dummy load (common practice).
		"loop.extra_loss_ohm":  {Min: 0, Max: 100, Unit: "Ω"},
		"loop.ground_loss_ohm": {Min: 0, Max: 100, Unit: "Ω"},
		// A poor capacitor has a Q of some hundreds, a good vacuum one tens of thousands (from memory).
		"loop.capacitor_q": {Min: 10, Max: 1e7, Zero: "lossless"},
		"loop.proximity":   {Min: 1, Max: 10, Zero: "estimate"},
		"loop.stray_pf":    {Min: 0, Max: 1000, Unit: "pF"},

		"feed.design_hz":  FrequencyRange(),
		"feed.octave_swr": {Min: 1, Max: 10},

		// Air and vacuum variables run from a few pF to a few thousand (common practice).
		"capacitor.min_pf":         {Min: 0.1, Max: 10000, Unit: "pF"},
		"capacitor.max_pf":         {Min: 0.1, Max: 10000, Unit: "pF"},
		"capacitor.span_turns":     {Min: 0.01, Max: 100, Unit: "turns"},
		"capacitor.temp_ppm_per_k": {Min: -1000, Max: 1000, Unit: "ppm/K"},
		"capacitor.end_margin_pct": {Min: 0, Max: 20, Unit: "%"},

		// Steppers of 4 to a few thousand steps a revolution, drivers to 256 microsteps (common
		// practice); speeds and ramps up to what a microstepping driver can pulse, about 1e6
		// steps/s (from memory).
		"drive.steps_per_rev":         {Min: 4, Max: 10000},
		"drive.microsteps":            {Min: 1, Max: 256},
		"drive.gear_ratio":            {Min: 1, Max: 1000},
		"drive.backlash_steps":        {Min: 0, Max: 5000, Unit: "steps"},
		"drive.max_speed_sps":         {Min: 1, Max: 1e6, Unit: "steps/s"},
		"drive.accel_sps2":            {Min: 1, Max: 1e8, Unit: "steps/s²"},
		"drive.settle_ms":             {Min: 0, Max: 2000, Unit: "ms"},
		"drive.home.at_turns":         {Min: -1, Max: 100, Unit: "turns"},
		"drive.home.hysteresis_steps": {Min: 0, Max: 5000, Unit: "steps"},

		// Couplers sample 20–40 dB down (common practice); log detectors run from about −90 to
		// +20 dBm at some tens of mV/dB (from memory).
		"coupler.coupling_db":         {Min: 0, Max: 60, Unit: "dB"},
		"coupler.slope_mv_per_db":     {Min: 0.1, Max: 1000, Unit: "mV/dB"},
		"coupler.intercept_dbm":       {Min: -150, Max: 50, Unit: "dBm"},
		"coupler.floor_dbm":           {Min: -150, Max: 50, Unit: "dBm"},
		"coupler.ceiling_dbm":         {Min: -150, Max: 50, Unit: "dBm"},
		"coupler.sensitivity_v_per_w": {Min: 0, Max: 1e6, Unit: "V/W"},
		"coupler.max_volts":           {Min: 0, Max: 100, Unit: "V"},

		// A drawing is seldom better than a tenth of a percent, and a loop half again or half
		// as large as drawn is no longer the loop described (from memory); strays of a
		// hundred pF are a badly built loop's (common practice).
		"tolerance.capacitance": {Min: 0.001, Max: 0.5},
		"tolerance.stray_pf":    {Min: 0, Max: 100, Unit: "pF"},

		// The coldest and hottest places loops are put up (from memory).
		"site.mean_c": {Min: -50, Max: 60, Unit: "°C"},
	}
}

// tableRange is the range of column i of the capacitor table: [fraction of travel, pF].
func tableRange(i int) Range {
	if i == 0 {
		return Range{Min: 0, Max: 1}
	}
	return keyRanges()["capacitor.max_pf"]
}

// CheckKeys checks every numeric key of v (a struct whose fields carry TOML tags; embedded
// structs are inlined) against its range, as ranges gives it, with prefix before every key.
// A numeric key that has no range, or a numeric kind it cannot read as a number (a slice, a
// map), is an error too, so that nothing passes unchecked. It returns one error per bad key,
// as "prefix.section.key: value: want range", and the sections (the first part of the key
// below prefix) that had one. It is how Validate checks a description, and how a description's
// extension (the simulator's own sections) checks its keys the same way.
func CheckKeys(v any, prefix string, ranges func(key string) (Range, bool)) (errs []error, bad map[string]bool) {
	bad = map[string]bool{}
	WalkKeys(v, prefix, func(key string, x float64, numeric bool) {
		rel := strings.TrimPrefix(strings.TrimPrefix(key, prefix), ".")
		section, _, _ := strings.Cut(rel, ".")
		r, ok := ranges(key)
		if !ok || !numeric {
			bad[section] = true
			errs = append(errs, fmt.Errorf("%s: no accepted range is known for this key", key))
			return
		}
		if err := r.Check(x); err != nil {
			bad[section] = true
			errs = append(errs, fmt.Errorf("%s: %w", key, err))
		}
	})
	return errs, bad
}

// WalkKeys calls visit for every numeric key of v (a struct, or a pointer to one, whose fields
// carry TOML tags; embedded structs without a tag are inlined, nil pointers skipped) with its
// TOML path below prefix. A kind it cannot read as a number (a slice, a map) is visited with
// numeric false, so that it cannot pass unchecked, unless its field is tagged range:"apart" (the
// capacitor table, which Validate checks point by point).
func WalkKeys(v any, prefix string, visit func(key string, x float64, numeric bool)) {
	walkKeys(reflect.ValueOf(v), prefix, visit)
}

func walkKeys(v reflect.Value, prefix string, visit func(key string, x float64, numeric bool)) {
	if v.Kind() == reflect.Pointer {
		if v.IsNil() {
			return
		}
		v = v.Elem()
	}
	t := v.Type()
	for i := range t.NumField() {
		sf := t.Field(i)
		tag := strings.Split(sf.Tag.Get("toml"), ",")[0]
		f := v.Field(i)
		if sf.Anonymous && tag == "" && f.Kind() == reflect.Struct {
			walkKeys(f, prefix, visit)
			continue
		}
		if tag == "" || tag == "-" || !sf.IsExported() || sf.Tag.Get("range") == "apart" {
			continue
		}
		key := tag
		if prefix != "" {
			key = prefix + "." + tag
		}
		switch f.Kind() {
		case reflect.Struct:
			walkKeys(f, key, visit)
		case reflect.Pointer:
			if !f.IsNil() && f.Elem().Kind() == reflect.Struct {
				walkKeys(f.Elem(), key, visit)
			}
		case reflect.Float32, reflect.Float64:
			visit(key, f.Float(), true)
		case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64:
			visit(key, float64(f.Int()), true)
		case reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
			visit(key, float64(f.Uint()), true)
		case reflect.String, reflect.Bool:
		default:
			visit(key, 0, false)
		}
	}
}

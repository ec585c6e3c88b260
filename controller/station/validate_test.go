package station

import (
	"fmt"
	"math"
	"reflect"
	"regexp"
	"strings"
	"testing"
)

// withEveryKey is the demo station with a home switch, so that every key of the description
// has a field to walk.
func withEveryKey() Description {
	d := DefaultDescription()
	d.Drive.Home = &Switch{AtTurns: 0.01, HysteresisSteps: 10}
	return d
}

// numericKeys lists every numeric key of the description, found by reflection.
func numericKeys(t *testing.T) []string {
	t.Helper()
	var keys []string
	WalkKeys(withEveryKey(), "", func(key string, _ float64, numeric bool) {
		if !numeric {
			t.Errorf("key %s: a numeric kind the range check cannot read", key)
		}
		keys = append(keys, key)
	})
	if len(keys) < 35 {
		t.Fatalf("found only %d numeric keys: the walk is broken", len(keys))
	}
	return keys
}

// field returns the settable field of d at a TOML key path.
func field(d *Description, key string) reflect.Value {
	v := reflect.ValueOf(d).Elem()
	for _, part := range strings.Split(key, ".") {
		if v.Kind() == reflect.Pointer {
			v = v.Elem()
		}
		t := v.Type()
		found := false
		for i := range t.NumField() {
			if strings.Split(t.Field(i).Tag.Get("toml"), ",")[0] == part {
				v, found = v.Field(i), true
				break
			}
		}
		if !found {
			panic("no field for key " + key)
		}
	}
	return v
}

func TestEveryNumericKeyHasARange(t *testing.T) {
	keys := numericKeys(t)
	seen := map[string]bool{}
	for _, k := range keys {
		seen[k] = true
		if _, ok := KeyRange(k); !ok {
			t.Errorf("key %s has no accepted range", k)
		}
	}
	for k := range keyRanges() {
		if !seen[k] {
			t.Errorf("range for %s, which is no key of the description", k)
		}
	}
}

// badValues are values outside r that a field of kind k can hold: NaN and both infinities for
// floats, and a value below and above the range.
func badValues(r Range, k reflect.Kind) []float64 {
	below := math.Min(r.Min-math.Max(1, math.Abs(r.Min)), -1) // never the 0 that selects a default
	if r.MinOpen {
		below = r.Min
	}
	above := r.Max + math.Max(1, math.Abs(r.Max))
	var vals []float64
	switch k {
	case reflect.Float64:
		vals = []float64{math.NaN(), math.Inf(1), math.Inf(-1), below, above}
	case reflect.Int:
		vals = []float64{below, above}
	}
	if r.Zero != "" && r.Min > 0 {
		vals = append(vals, r.Min/2) // between the 0 that selects a default and the range
	}
	return vals
}

func setNumber(f reflect.Value, v float64) {
	switch f.Kind() {
	case reflect.Float64:
		f.SetFloat(v)
	case reflect.Int:
		f.SetInt(int64(v))
	default:
		panic("unexpected kind " + f.Kind().String())
	}
}

func TestValidateNamesEveryBadKeyAndItsRange(t *testing.T) {
	for _, key := range numericKeys(t) {
		r, _ := KeyRange(key)
		d := withEveryKey()
		vals := badValues(r, field(&d, key).Kind())
		if len(vals) == 0 {
			t.Errorf("%s: no bad values to try for kind %s", key, field(&d, key).Kind())
		}
		for _, v := range vals {
			d := withEveryKey()
			setNumber(field(&d, key), v)
			err := d.Validate()
			want := fmt.Sprintf("%s: %s: want %s", key, formatNumber(v), r)
			if err == nil || !strings.Contains(err.Error(), want) {
				t.Errorf("%s = %g: error %v, want it to contain %q", key, v, err, want)
			}
		}
	}
}

// TOML itself can spell NaN and the infinities; they must fail at the parser's door.
func TestParseRejectsNonFiniteKeys(t *testing.T) {
	for _, key := range numericKeys(t) {
		d := withEveryKey()
		if field(&d, key).Kind() != reflect.Float64 {
			continue
		}
		i := strings.LastIndex(key, ".")
		section, name := key[:i], key[i+1:]
		for _, lit := range []string{"nan", "inf", "-inf"} {
			text := fmt.Sprintf("[%s]\n%s = %s\n", section, name, lit)
			if section == "drive.home" && name != "at_turns" {
				text = fmt.Sprintf("[drive.home]\nat_turns = 0.01\n%s = %s\n", name, lit)
			}
			_, err := Parse(strings.NewReader(text))
			if err == nil || !strings.Contains(err.Error(), key+": ") || !strings.Contains(err.Error(), "want") {
				t.Errorf("%s = %s: %v", key, lit, err)
			}
		}
	}
	_, err := Parse(strings.NewReader("[capacitor]\ntable = [[0, 10], [nan, 100], [1, inf]]\n"))
	for _, want := range []string{"capacitor.table: point 2: fraction NaN: want 0 to 1",
		"capacitor.table: point 3: pf +Inf: want 0.1 to 10000 pF"} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("table with NaN and Inf: error %v, want it to contain %q", err, want)
		}
	}
}

func TestValidateReportsEveryBadKeyAtOnce(t *testing.T) {
	d := DefaultDescription()
	d.Loop.DiameterM = math.NaN()
	d.Coupler.CouplingDB = math.Inf(1)
	d.Site.MeanC = -100
	d.Drive.Microsteps = 0
	d.Tolerance.Capacitance = 0
	d.Capacitor.Travel = "sideways"
	err := d.Validate()
	for _, want := range []string{
		"loop.diameter_m: NaN: want 0.1 to 20 m",
		"coupler.coupling_db: +Inf: want 0 to 60 dB",
		"site.mean_c: -100: want -50 to 60 °C",
		"drive.microsteps: 0: want 1 to 256",
		"tolerance.capacitance: 0: want 0.001 to 0.5",
		`capacitor.travel: "sideways": want free or stops`,
	} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("error %v lacks %q", err, want)
		}
	}
	// A section with a bad key is not validated again by its part (which would report the
	// same key in other words).
	if strings.Contains(err.Error(), "loop geometry") {
		t.Errorf("the bad diameter reported twice: %v", err)
	}
}

// Every problem is its own error, and each begins with its key, so that a caller can put where
// the description sits in a larger file in front of each (errors.Join's parts).
func TestValidateGivesOneKeyedErrorPerProblem(t *testing.T) {
	d := DefaultDescription()
	d.Loop.DiameterM, d.Loop.ConductorM = 1.5, 0.2 // thicker than a tenth of the turn diameter, and the turns touch
	d.Feed.OctaveSWR = 0.5
	d.Coupler.FloorDBm = -90 // below the intercept
	d.Coupler.Detector = "log"
	d.Drive.Home = &Switch{AtTurns: 3}
	err := d.Validate()
	j, ok := err.(interface{ Unwrap() []error })
	if !ok {
		t.Fatalf("not a joined error: %v", err)
	}
	keyed := regexp.MustCompile(`^[a-z_]+(\.[a-z_]+)*: `)
	for _, e := range j.Unwrap() {
		if _, nested := e.(interface{ Unwrap() []error }); nested || strings.Contains(e.Error(), "\n") {
			t.Errorf("a joined error inside: %q", e)
		}
		if !keyed.MatchString(e.Error()) {
			t.Errorf("%q does not begin with its key", e)
		}
	}
	for _, want := range []string{"loop: loop geometry: conductor diameter 0.2 m", "loop: loop geometry: spacing",
		"feed.octave_swr: 0.5: want 1 to 10", "coupler: detector floor -90 dBm: want at or above the intercept -84 dBm",
		"drive.home.at_turns: 3: want at most the capacitor's span_turns (0.5)"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("error lacks %q:\n%v", want, err)
		}
	}
}

// The ranges of the description must not be wider than the parts accept: a value at either end
// of a key's range, all else as in the demo station, must validate, save where a cross-key rule
// of the part forbids it with the demo's other values.
func TestKeyRangeEndsAreAccepted(t *testing.T) {
	crossKey := map[string]string{
		"loop.diameter_m 0.1":      "the 22 mm conductor at most a tenth of the turn diameter",
		"loop.conductor_m 0.2":     "turns must not touch: the 0.1 m spacing above the conductor",
		"loop.spacing_m 0":         "turns must not touch: spacing above the 22 mm conductor",
		"capacitor.min_pf 10000":   "min_pf below max_pf (500)",
		"capacitor.max_pf 0.1":     "max_pf above min_pf (10)",
		"drive.home.at_turns 100":  "the home switch must lie within the span (0.5 turns)",
		"coupler.intercept_dbm 50": "the detector floor (−75 dBm) at or above the intercept",
		"coupler.floor_dbm -150":   "the floor at or above the intercept (−84 dBm)",
		"coupler.floor_dbm 50":     "the floor below the ceiling (15 dBm)",
		"coupler.ceiling_dbm -150": "the ceiling above the floor (−75 dBm)",
	}
	used := map[string]bool{}
	for _, key := range numericKeys(t) {
		r, _ := KeyRange(key)
		lo := r.Min
		if r.MinOpen {
			lo = math.Nextafter(r.Min, math.Inf(1))
		}
		for _, v := range []float64{lo, r.Max} {
			d := withEveryKey()
			setNumber(field(&d, key), v)
			name := fmt.Sprintf("%s %g", key, v)
			err := d.Validate()
			if why, ok := crossKey[name]; ok {
				used[name] = true
				if err == nil {
					t.Errorf("%s: accepted, though %s", name, why)
				}
				continue
			}
			if err != nil {
				t.Errorf("%s is within the key's range but fails: %v", name, err)
			}
		}
	}
	for k := range crossKey {
		if !used[k] {
			t.Errorf("cross-key exception %q matched no case", k)
		}
	}
}

func TestRangeWords(t *testing.T) {
	for _, c := range []struct {
		r    Range
		v    float64
		want string
	}{
		{Range{Min: 0.1, Max: 20, Unit: "m"}, math.NaN(), "NaN: want 0.1 to 20 m"},
		{Range{Min: 0, MinOpen: true, Max: 10000, Unit: "W"}, 0, "0: want more than 0 and at most 10000 W"},
		{Range{Min: 1, Max: 10, Zero: "estimate"}, 0.5, "0.5: want 0 (estimate) or 1 to 10"},
		{FrequencyRange(), 1e9, "1e+09: want 100000 to 60000000 Hz (100 kHz to 60 MHz)"},
		{Range{Min: -50, Max: 60, Unit: "°C"}, math.Inf(-1), "-Inf: want -50 to 60 °C"},
	} {
		err := c.r.Check(c.v)
		if err == nil || err.Error() != c.want {
			t.Errorf("Check(%g) = %v, want %q", c.v, err, c.want)
		}
	}
	r := Range{Min: 1, Max: 10, Zero: "estimate"}
	for _, v := range []float64{0, 1, 10} {
		if err := r.Check(v); err != nil {
			t.Errorf("Check(%g) = %v, want nil", v, err)
		}
	}
}

// A struct that embeds a description and adds sections of its own is walked and checked the
// same way, its own keys below their prefix.
func TestCheckKeysOfAnExtension(t *testing.T) {
	type own struct {
		Knob  float64 `toml:"knob"`
		Count []int   `toml:"count"`
	}
	ext := struct {
		Description
		Own own `toml:"own"`
	}{Description: DefaultDescription(), Own: own{Knob: 7}}
	var keys []string
	WalkKeys(ext, "", func(key string, _ float64, numeric bool) {
		if key == "own.count" && numeric {
			t.Error("a slice was read as a number")
		}
		keys = append(keys, key)
	})
	if !contains(keys, "loop.turns") || !contains(keys, "own.knob") || !contains(keys, "own.count") {
		t.Errorf("keys %v: the embedded description's or the extension's are missing", keys)
	}
	ranges := func(key string) (Range, bool) {
		if key == "ext.own.knob" {
			return Range{Min: 0, Max: 5}, true
		}
		return Range{}, false
	}
	errs, bad := CheckKeys(ext.Own, "ext.own", ranges)
	if len(errs) != 2 || !bad["knob"] || !bad["count"] {
		t.Fatalf("errors %v, bad sections %v", errs, bad)
	}
	if got := errs[0].Error(); got != "ext.own.knob: 7: want 0 to 5" {
		t.Errorf("%q", got)
	}
	if got := errs[1].Error(); got != "ext.own.count: no accepted range is known for this key" {
		t.Errorf("%q", got)
	}
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

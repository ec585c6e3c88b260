package sim

import (
	"fmt"
	"math"
	"reflect"
	"strings"
	"testing"

	"github.com/tankd/tankd/controller/station"
)

// simulatorKeys lists every numeric key of the simulator's own part of a station file.
func simulatorKeys(t *testing.T) []string {
	t.Helper()
	var keys []string
	station.WalkKeys(DefaultSpec().Simulator, "simulator", func(key string, _ float64, numeric bool) {
		if !numeric {
			t.Errorf("key %s: a numeric kind the range check cannot read", key)
		}
		keys = append(keys, key)
	})
	if len(keys) < 15 {
		t.Fatalf("found only %d numeric keys: the walk is broken", len(keys))
	}
	return keys
}

// field returns the settable field of s at a TOML key path.
func field(s *Spec, key string) reflect.Value {
	v := reflect.ValueOf(s).Elem()
	for _, part := range strings.Split(key, ".") {
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

// Every numeric key of a station file has a range: the description's keys their own
// (controller/station tests them), the simulator's here.
func TestEveryNumericKeyHasARange(t *testing.T) {
	seen := map[string]bool{}
	station.WalkKeys(DefaultSpec(), "", func(key string, _ float64, _ bool) {
		seen[key] = true
		if _, ok := KeyRange(key); !ok {
			t.Errorf("key %s has no accepted range", key)
		}
	})
	for k := range simulatorRanges() {
		if !seen[k] {
			t.Errorf("range for %s, which is no key of a station file", k)
		}
		if _, ok := station.KeyRange(k); ok {
			t.Errorf("%s has a range in the description's table too", k)
		}
	}
	if len(simulatorKeys(t)) != len(simulatorRanges()) {
		t.Errorf("%d simulator keys, %d ranges", len(simulatorKeys(t)), len(simulatorRanges()))
	}
}

// badValues are values outside r that a field of kind k can hold.
func badValues(r station.Range, k reflect.Kind) []float64 {
	below := math.Min(r.Min-math.Max(1, math.Abs(r.Min)), -1)
	if r.MinOpen {
		below = r.Min
	}
	above := r.Max + math.Max(1, math.Abs(r.Max))
	switch k {
	case reflect.Float64:
		return []float64{math.NaN(), math.Inf(1), math.Inf(-1), below, above}
	case reflect.Int:
		return []float64{below, above}
	}
	return nil
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

func TestValidateNamesEveryBadSimulatorKeyAndItsRange(t *testing.T) {
	for _, key := range simulatorKeys(t) {
		r, _ := KeyRange(key)
		s := DefaultSpec()
		kind := field(&s, key).Kind()
		if kind == reflect.Uint64 {
			if key != "simulator.seed" || r.Min != 0 || r.Max != math.MaxUint64 {
				t.Errorf("%s: an unsigned key that does not accept every value", key)
			}
			continue // every seed is a seed
		}
		vals := badValues(r, kind)
		if len(vals) == 0 {
			t.Errorf("%s: no bad values to try for kind %s", key, kind)
		}
		for _, v := range vals {
			s := DefaultSpec()
			setNumber(field(&s, key), v)
			err := s.Validate()
			want := key + ": " + r.Check(v).Error() // e.g. "simulator.coupler.adc_bits: 7: want 8 to 24"
			if err == nil || !strings.Contains(err.Error(), want) {
				t.Errorf("%s = %g: error %v, want it to contain %q", key, v, err, want)
			}
		}
	}
}

// TOML itself can spell NaN and the infinities; they must fail at the parser's door.
func TestParseSpecRejectsNonFiniteKeys(t *testing.T) {
	for _, key := range simulatorKeys(t) {
		s := DefaultSpec()
		if field(&s, key).Kind() != reflect.Float64 {
			continue
		}
		i := strings.LastIndex(key, ".")
		for _, lit := range []string{"nan", "inf", "-inf"} {
			text := fmt.Sprintf("[%s]\n%s = %s\n", key[:i], key[i+1:], lit)
			_, err := ParseSpec(strings.NewReader(text))
			if err == nil || !strings.Contains(err.Error(), key+": ") || !strings.Contains(err.Error(), "want") {
				t.Errorf("%s = %s: %v", key, lit, err)
			}
		}
	}
}

func TestValidateReportsEveryBadKeyAtOnce(t *testing.T) {
	s := DefaultSpec()
	s.Loop.DiameterM = math.NaN()
	s.Simulator.Radio.MaxPowerW = math.Inf(1)
	s.Simulator.Weather.SwingK = -1
	s.Drive.Microsteps = 0
	err := s.Validate()
	for _, want := range []string{
		"loop.diameter_m: NaN: want 0.1 to 20 m",
		"simulator.radio.max_power_w: +Inf: want more than 0 and at most 10000 W",
		"simulator.weather.swing_k: -1: want 0 to 30 K",
		"drive.microsteps: 0: want 1 to 256",
	} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("error %v lacks %q", err, want)
		}
	}
	// one error per problem, as the description's own
	if j, ok := err.(interface{ Unwrap() []error }); !ok || len(j.Unwrap()) != 4 {
		t.Errorf("want four errors joined, have %v", err)
	}
}

// The simulator's ranges must not be wider than its parts accept: a value at either end of a
// key's range, all else as in the demo station, must validate and build a station.
func TestSimulatorKeyRangeEndsAreAccepted(t *testing.T) {
	for _, key := range simulatorKeys(t) {
		r, _ := KeyRange(key)
		s := DefaultSpec()
		if field(&s, key).Kind() == reflect.Uint64 {
			continue
		}
		lo := r.Min
		if r.MinOpen {
			lo = math.Nextafter(r.Min, math.Inf(1))
		}
		for _, v := range []float64{lo, r.Max} {
			s := DefaultSpec()
			setNumber(field(&s, key), v)
			if err := s.Validate(); err != nil {
				t.Errorf("%s %g is within the key's range but fails: %v", key, v, err)
			}
		}
	}
}

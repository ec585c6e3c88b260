package station

import (
	"bytes"
	"errors"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/BurntSushi/toml"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/tune"
)

func TestPresetsAreValid(t *testing.T) {
	for name, d := range Presets() {
		if err := d.Validate(); err != nil {
			t.Errorf("%s: %v", name, err)
		}
	}
	if _, err := Preset("nonesuch"); err == nil || !strings.Contains(err.Error(), "butterfly, default, vacuum") {
		t.Errorf("unknown preset: %v", err)
	}
}

func TestParseOverridesAndRejects(t *testing.T) {
	d, err := Parse(strings.NewReader("name = \"x\"\n[loop]\nturns = 1\n[capacitor]\ntravel = \"stops\"\nspan_turns = 12\nmin_pf = 5\nmax_pf = 1000\n"))
	if err != nil {
		t.Fatal(err)
	}
	if d.Loop.Turns != 1 || d.Capacitor.SpanTurns != 12 || d.Loop.DiameterM != 2.3 || !d.HardStops() {
		t.Errorf("override not applied over the defaults: %+v", d)
	}
	_, err = Parse(strings.NewReader("[loop]\nturnz = 2\n[simulator]\nseed = 1\n"))
	if !errors.Is(err, ErrUnknownKey) || !strings.Contains(err.Error(), "loop.turnz") || !strings.Contains(err.Error(), "simulator") {
		t.Errorf("unknown keys not reported: %v", err)
	}
	_, err = Parse(strings.NewReader("[loop]\nturns = 9\n[drive]\nmicrosteps = 0\n"))
	if err == nil || !strings.Contains(err.Error(), "loop.turns: 9") || !strings.Contains(err.Error(), "drive.microsteps: 0") {
		t.Errorf("not every bad key reported: %v", err)
	}
	if _, err := Load("no-such-file.toml"); err == nil {
		t.Error("a missing file was read")
	}
}

// What a TOML encoder writes of a description, Decode reads back unchanged (a configuration that
// holds a description is written out and read back this way).
func TestEncodeDecodeRoundTrip(t *testing.T) {
	for name, want := range Presets() {
		want.Capacitor.Table = [][2]float64{{0, want.Capacitor.MinPF}, {0.5, 100}, {1, want.Capacitor.MaxPF}}
		var b bytes.Buffer
		if err := toml.NewEncoder(&b).Encode(want); err != nil {
			t.Fatal(err)
		}
		var got Description // no defaults underneath: everything must come from the text
		if err := Decode(bytes.NewReader(b.Bytes()), &got); err != nil {
			t.Fatalf("%s: %v\n%s", name, err, b.String())
		}
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: round trip changed the description:\n%+v\n%+v", name, got, want)
		}
	}
}

// The settings the controller derives, worked by hand from the demo and the vacuum presets.
func TestDerivedSettings(t *testing.T) {
	d := DefaultDescription()
	// 200 steps × 16 microsteps × 50:1 = 160,000 microsteps a shaft turn (the demo's drive)
	if got := d.StepsPerTurn(); got != 160000 {
		t.Errorf("steps per turn %g", got)
	}
	// 40 steps of play: 1.5 × 40 + 4 = 64
	if got := d.NominalBacklash(); got != 64 {
		t.Errorf("nominal backlash %d, want 64", got)
	}
	// travel 0.5 turn = 80,000 steps, 0.5 % margin = 400 steps, half the play 20 steps on top
	if lo, hi := d.SoftLimits(); lo != 420 || hi != 79620 {
		t.Errorf("soft limits %d–%d, want 420–79620", lo, hi)
	}
	ax := d.AxisOptions(d.NominalBacklash())
	if ax.Min != 420 || ax.Max != 79620 || ax.MaxSpeed != 16000 || ax.Accel != 100000 || ax.Settle != 15*time.Millisecond ||
		ax.Backlash != 64 || ax.Approach != motion.Up || ax.Homing != (motion.HomingOptions{}) {
		t.Errorf("axis options %+v", ax)
	}
	// 0.1 % of the 80,000-step travel for a straight law, 0.5 % for a table
	if got := d.LawBend(); math.Abs(got-80) > 1e-9 {
		t.Errorf("law bend %g, want 80", got)
	}
	d.Capacitor.Table = [][2]float64{{0, 10}, {1, 500}}
	if got := d.LawBend(); math.Abs(got-400) > 1e-9 {
		t.Errorf("law bend of a table %g, want 400", got)
	}

	v, _ := Preset("vacuum")
	// 200 × 8 × 3 = 4,800 steps a turn; the switch at 0.1 turn is 480 steps up; nominal play
	// 1.5 × 6 + 4 = 13; seek speed √(40,000 × 480 / 2) = 3,098 steps/s, below half the top speed
	ax = v.AxisOptions(v.NominalBacklash())
	h := ax.Homing
	if h.Dir != motion.Down || math.Abs(h.FastSpeed-math.Sqrt(40000*480/2)) > 1e-9 || h.SlowSpeed != 200 ||
		h.BackOff != 48 || h.HomePosition != 477 {
		t.Errorf("homing %+v: want down at 3098 then 200 steps/s, back-off max(4·8, 2·13)+16 = 48, home at 480−3 = 477", h)
	}
	to := v.TunerOptions(tune.Options{Transmit: true}, 13)
	if !to.HasHome || !to.HardStops || to.NominalBacklash != 13 || !to.Transmit {
		t.Errorf("tuner options %+v", to)
	}
	if to := DefaultDescription().TunerOptions(tune.Options{}, 64); to.HasHome || to.HardStops {
		t.Errorf("the demo has neither a switch nor stops: %+v", to)
	}
}

func TestMapOptionsCarryThePrior(t *testing.T) {
	d := DefaultDescription()
	mo, err := d.MapOptions()
	if err != nil {
		t.Fatal(err)
	}
	if mo.Bend != d.LawBend() {
		t.Errorf("bend %g, want %g", mo.Bend, d.LawBend())
	}
	p, err := d.Prior(d.Site.MeanC)
	if err != nil {
		t.Fatal(err)
	}
	want, _ := p.Predict(3750000)
	got, ok := mo.Prior.Predict(3750000)
	if !ok || got != want {
		t.Errorf("the map's prior predicts %+v, the site's %+v", got, want)
	}
	// The tolerance is the prior's σ: doubling it doubles σ and moves nothing.
	d.Tolerance.Capacitance *= 2
	d.Tolerance.StrayPF *= 2
	p2, _ := d.Prior(d.Site.MeanC)
	wide, _ := p2.Predict(3750000)
	if wide.Pos != want.Pos || math.Abs(wide.Sigma-2*want.Sigma) > 1e-9*want.Sigma {
		t.Errorf("σ %g with twice the tolerance, %g without; positions %g, %g", wide.Sigma, want.Sigma, wide.Pos, want.Pos)
	}
	if _, err := memmap.New(mo); err != nil {
		t.Errorf("the map refuses the options: %v", err)
	}
}

func TestCalibration(t *testing.T) {
	c, err := DefaultDescription().Calibration()
	if err != nil {
		t.Fatal(err)
	}
	// 25 mV/dB log detectors behind a 30 dB coupler (the demo's description)
	if c.CouplingDB != 30 || c.Forward != c.Reflected || c.Forward.Law != sense.LogLinear || c.Forward.Slope != 0.025 {
		t.Errorf("calibration %+v", c)
	}
	b, _ := Preset("butterfly")
	if c, err = b.Calibration(); err != nil || c.Forward.Law != sense.SquareLaw || c.Forward.Sensitivity != 50 {
		t.Errorf("butterfly calibration %+v, %v", c, err)
	}
	if err := c.Validate(); err != nil {
		t.Error(err)
	}
}

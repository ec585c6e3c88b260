package sim

import (
	"context"
	"math"
	"os"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/station"
	"github.com/tankd/tankd/sim/vclock"
)

func TestDefaultSpecValid(t *testing.T) {
	if err := DefaultSpec().Validate(); err != nil {
		t.Fatal(err)
	}
	if DefaultSpec().Description.Name != station.DefaultDescription().Name {
		t.Error("the default spec is not the default description simulated")
	}
}

func TestParseSpecOverridesAndRejects(t *testing.T) {
	s, err := ParseSpec(strings.NewReader("name = \"x\"\n[loop]\nturns = 1\n[capacitor]\ntravel = \"stops\"\nspan_turns = 12\nmin_pf = 5\nmax_pf = 1000\n[simulator]\nseed = 7\n[simulator.coupler]\nadc_bits = 12\n"))
	if err != nil {
		t.Fatal(err)
	}
	if s.Loop.Turns != 1 || s.Capacitor.SpanTurns != 12 || s.Loop.DiameterM != 2.3 || s.Simulator.Seed != 7 ||
		s.Simulator.Coupler.ADCBits != 12 || s.Simulator.Coupler.ADCNoiseMV != 0.6 {
		t.Errorf("override not applied over the defaults: %+v", s)
	}
	_, err = ParseSpec(strings.NewReader("[loop]\nturnz = 2\n[simulator.coupler]\nbits = 3\n"))
	if err == nil || !strings.Contains(err.Error(), "loop.turnz") || !strings.Contains(err.Error(), "simulator.coupler.bits") {
		t.Errorf("unknown keys not reported: %v", err)
	}
	_, err = ParseSpec(strings.NewReader("[loop]\nturns = 9\n[drive]\nmicrosteps = 0\n[simulator.drive]\nmiss_rate = 1\n"))
	for _, want := range []string{"loop.turns: 9", "drive.microsteps: 0", "simulator.drive.miss_rate: 1"} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("error %v lacks %q", err, want)
		}
	}
	// the simulator's knobs belong in [simulator], not in the description's sections
	if _, err := ParseSpec(strings.NewReader("[drive]\npullout_sps = 1000\n")); err == nil || !strings.Contains(err.Error(), "drive.pullout_sps") {
		t.Errorf("a simulator knob in [drive]: %v", err)
	}
}

func TestExampleConfigsParse(t *testing.T) {
	files, _ := os.ReadDir("../configs/stations")
	n := 0
	for _, f := range files {
		if !strings.HasSuffix(f.Name(), ".toml") {
			continue
		}
		n++
		if _, err := LoadSpec("../configs/stations/" + f.Name()); err != nil {
			t.Errorf("%s: %v", f.Name(), err)
		}
	}
	if n == 0 {
		t.Fatal("no example station descriptions in configs/stations/")
	}
}

func TestRFDipMatchesModel(t *testing.T) {
	s := DefaultSpec()
	c, err := s.CapacitorModel()
	if err != nil {
		t.Fatal(err)
	}
	rf, err := NewRF(s.Model(), s.FeedModel(), c)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range []float64{1.85e6, 3.75e6, 4.0e6} {
		turns, ok := rf.DipTurns(f, 20)
		if !ok {
			t.Fatalf("%g Hz out of the capacitor's range", f)
		}
		// At the dip the reactance vanishes and the SWR is the feed's best.
		if y := rf.Detuning(f, turns, 20); math.Abs(y) > 1e-6 {
			t.Errorf("%g Hz: detuning %g at the dip", f, y)
		}
		if got, want := rf.SWR(f, turns, 20), s.FeedModel().BestSWR(f); math.Abs(got-want) > 1e-9 {
			t.Errorf("%g Hz: SWR %g at the dip, want the feed's best %g", f, got, want)
		}
	}
	// The demo's two turns hold about 26 pF of their own and resonate with it near 6.5 MHz
	// (1/(2π·√(21 µH·29 pF)) with the leads): no capacitor tunes the loop on 40 m.
	if turns, ok := rf.DipTurns(7.1e6, 20); ok {
		t.Errorf("7.1 MHz is above the demo loop's self-resonance, yet its dip is at %g turns", turns)
	}
}

// The physics prior and the simulator agree on where the dip is for a loop that is exactly as
// described: the prior's position is the simulator's dip on the capacitor shaft, moved by half
// the play (the up-approach side).
func TestPriorAgreesWithTheSimulator(t *testing.T) {
	for name, s := range Presets() {
		rf, err := s.RF()
		if err != nil {
			t.Fatal(err)
		}
		p, err := s.Prior(20)
		if err != nil {
			t.Fatal(err)
		}
		for _, f := range []float64{1.85e6, 3.75e6, 4.0e6} {
			turns, ok := rf.DipTurns(f, 20)
			pr, pok := p.Predict(physic.Frequency(f) * physic.Hertz)
			if !ok {
				continue // beyond this capacitor: TestPriorSlopeMatchesFiniteDifference's business
			}
			if want := turns*s.StepsPerTurn() + s.Drive.BacklashSteps/2; !pok || math.Abs(pr.Pos-want) > 1e-6 {
				t.Errorf("%s at %g Hz: prior %+v, simulator's dip at %g steps", name, f, pr, want)
			}
		}
	}
}

func BenchmarkSWREvaluation(b *testing.B) {
	s := DefaultSpec()
	c, _ := s.CapacitorModel()
	rf, _ := NewRF(s.Model(), s.FeedModel(), c)
	turns, _ := rf.DipTurns(3.75e6, 20)
	sum := 0.0
	i := 0.0
	for b.Loop() {
		sum += rf.Gamma2(3.75e6, turns+i*1e-7, 20)
		i++
	}
	_ = sum
}

func TestConfigFilesArePresets(t *testing.T) {
	for name, want := range Presets() {
		s, err := LoadSpec("../configs/stations/" + name + ".toml")
		if err != nil {
			t.Fatal(err)
		}
		if got, want := fmtSpec(s), fmtSpec(want); got != want {
			t.Errorf("configs/stations/%s.toml drifted from the built-in preset:\n file %s\n code %s", name, got, want)
		}
	}
	if _, err := Preset("nonesuch"); err == nil {
		t.Error("unknown preset accepted")
	}
	for name := range station.Presets() {
		if _, err := Preset(name); err != nil {
			t.Errorf("station preset %s has no simulated station: %v", name, err)
		}
	}
}

// A station file's keying delays reach the simulated radio: 0 means the carrier follows the
// key at once, and a slow radio's carrier reaches the antenna only after its key-up time.
func TestStationFileKeyingDelays(t *testing.T) {
	for _, c := range []struct {
		keyUp    float64
		wantAt0  bool
		wantAt99 bool
	}{{0, true, true}, {100, false, false}, {30, false, true}} {
		s := DefaultSpec()
		s.Simulator.Radio.KeyUpMS = c.keyUp
		clk := vclock.New(vclock.Epoch)
		st, err := NewStation(s, clk)
		if err != nil {
			t.Fatal(err)
		}
		if err := st.Radio.Key(context.Background(), 5*physic.Watt); err != nil {
			t.Fatal(err)
		}
		on0, _ := st.Radio.Carrier()
		clk.Advance(99 * time.Millisecond)
		on99, _ := st.Radio.Carrier()
		if on0 != c.wantAt0 || on99 != c.wantAt99 {
			t.Errorf("key_up_ms = %g: carrier %v at the key and %v 99 ms on, want %v and %v", c.keyUp, on0, on99, c.wantAt0, c.wantAt99)
		}
	}
}

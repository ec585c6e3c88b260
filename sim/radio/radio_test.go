package radio

import (
	"context"
	"errors"
	"strings"
	"testing"

	"periph.io/x/conn/v3/physic"
)

const (
	kHz = physic.KiloHertz
	MHz = physic.MegaHertz
	W   = physic.Watt
)

func newRadio(t *testing.T, o Opts) *Radio {
	t.Helper()
	r, err := New(o)
	if err != nil {
		t.Fatalf("New: %v", err)
	}
	return r
}

func TestNewDefaults(t *testing.T) {
	r := newRadio(t, Opts{})
	// The defaults documented on Opts.
	want := State{On: true, FreqA: 14200 * kHz, FreqB: 7100 * kHz, VFO: VFOA, Mode: USB, Power: 100 * W}
	if got := r.State(); got != want {
		t.Fatalf("state %+v, want %+v", got, want)
	}
	if r.MaxPower() != 100*W || r.String() != "sim radio" {
		t.Fatalf("MaxPower %s, name %q", r.MaxPower(), r.String())
	}
	if on, p := r.Carrier(); on || p != 0 {
		t.Fatalf("a new radio has a carrier of %s", p)
	}
}

func TestNewReportsEveryBadOption(t *testing.T) {
	_, err := New(Opts{
		Bands:    []Band{{Name: "upside down", Low: 7 * MHz, High: 6 * MHz}},
		MaxPower: -W,
		Power:    5 * W,
		Mode:     42,
	})
	if err == nil {
		t.Fatal("New accepted bad options")
	}
	for _, key := range []string{"Bands[0]", "MaxPower", "Power", "Mode"} {
		if !strings.Contains(err.Error(), key) {
			t.Errorf("error %q does not name %s", err, key)
		}
	}
	if _, err := New(Opts{FreqA: 9 * MHz}); err == nil || !strings.Contains(err.Error(), "FreqA") {
		t.Errorf("a start frequency outside the bands: %v", err)
	}
}

func TestBandEdges(t *testing.T) {
	ham := newRadio(t, Opts{})
	gen := newRadio(t, Opts{GeneralCoverage: true})
	cases := []struct {
		f            physic.Frequency
		tunes, gcTun bool // tunes in ham-only mode (= transmits) and in general coverage
		why          string
	}{
		{1800 * kHz, true, true, "160 m lower edge (ITU allocations, from memory)"},
		{1800*kHz - physic.Hertz, false, true, "just below 160 m"},
		{2000 * kHz, true, true, "160 m upper edge, Region 2 (from memory)"},
		{3999 * kHz, true, true, "80 m, Region 2 phone segment (from memory)"},
		{5357 * kHz, true, true, "inside the 60 m allocation of WRC-15 (from memory)"},
		{5400 * kHz, false, true, "above 60 m"},
		{7000 * kHz, true, true, "40 m lower edge (from memory)"},
		{7300 * kHz, true, true, "40 m upper edge, Region 2 (from memory)"},
		{7300*kHz + physic.Hertz, false, true, "just above 40 m"},
		{9500 * kHz, false, true, "31 m broadcast band, not amateur (from memory)"},
		{10150 * kHz, true, true, "30 m upper edge (from memory)"},
		{14350 * kHz, true, true, "20 m upper edge (from memory)"},
		{14351 * kHz, false, true, "just above 20 m"},
		{18100 * kHz, true, true, "17 m (from memory)"},
		{21450 * kHz, true, true, "15 m upper edge (from memory)"},
		{24940 * kHz, true, true, "12 m (from memory)"},
		{29700 * kHz, true, true, "10 m upper edge (from memory)"},
		{50100 * kHz, false, true, "6 m: not in the default bands, inside general coverage"},
		{25 * kHz, false, false, "below the 30 kHz general-coverage floor (documented default)"},
		{61 * MHz, false, false, "above the 60 MHz general-coverage ceiling (documented default)"},
	}
	for _, tc := range cases {
		err := ham.SetFrequency(tc.f)
		if tc.tunes != (err == nil) || (err != nil && !errors.Is(err, ErrOutOfBand)) {
			t.Errorf("%s: ham-band radio SetFrequency(%s) = %v", tc.why, tc.f, err)
		}
		err = gen.SetFrequency(tc.f)
		if tc.gcTun != (err == nil) || (err != nil && !errors.Is(err, ErrOutOfBand)) {
			t.Errorf("%s: general-coverage radio SetFrequency(%s) = %v", tc.why, tc.f, err)
		}
		if err != nil {
			continue
		}
		err = gen.Key(context.Background(), 5*W)
		if tc.tunes != (err == nil) || (err != nil && !errors.Is(err, ErrNoTransmit)) {
			t.Errorf("%s: general-coverage radio Key at %s = %v", tc.why, tc.f, err)
		}
		if err := gen.Unkey(context.Background()); err != nil {
			t.Fatal(err)
		}
	}
}

func TestRefusedFrequencyLeavesVFO(t *testing.T) {
	r := newRadio(t, Opts{})
	before := r.VFOFrequency(VFOB)
	if err := r.SetVFOFrequency(VFOB, 9*MHz); !errors.Is(err, ErrOutOfBand) {
		t.Fatalf("SetVFOFrequency(B, 9 MHz) = %v", err)
	}
	if got := r.VFOFrequency(VFOB); got != before {
		t.Fatalf("VFO B moved to %s on a refused change", got)
	}
	if err := r.SetVFOFrequency(VFO(7), 7*MHz); !errors.Is(err, ErrVFO) {
		t.Fatalf("SetVFOFrequency(7) = %v, want ErrVFO", err)
	}
}

func TestFrequencyRoundsToTuningStep(t *testing.T) {
	r := newRadio(t, Opts{})
	// The radio tunes in 1 Hz steps (documented on SetFrequency).
	cases := []struct{ set, want physic.Frequency }{
		{14074*kHz + 400*physic.MilliHertz, 14074 * kHz},
		{14074*kHz + 600*physic.MilliHertz, 14074*kHz + physic.Hertz},
		{14074*kHz + 500*physic.MilliHertz, 14074*kHz + physic.Hertz},
	}
	for _, tc := range cases {
		if err := r.SetFrequency(tc.set); err != nil {
			t.Fatal(err)
		}
		if got := r.Frequency(); got != tc.want {
			t.Errorf("SetFrequency(%d µHz): frequency %d µHz, want %d µHz", tc.set, got, tc.want)
		}
	}
}

func TestVFOSelect(t *testing.T) {
	r := newRadio(t, Opts{FreqA: 3573 * kHz, FreqB: 28074 * kHz})
	if err := r.SelectVFO(VFOB); err != nil {
		t.Fatal(err)
	}
	if r.VFO() != VFOB || r.Frequency() != 28074*kHz {
		t.Fatalf("VFO %s at %s after selecting B", r.VFO(), r.Frequency())
	}
	if err := r.SetFrequency(28100 * kHz); err != nil {
		t.Fatal(err)
	}
	if r.VFOFrequency(VFOA) != 3573*kHz || r.VFOFrequency(VFOB) != 28100*kHz {
		t.Fatalf("SetFrequency on B moved A: %+v", r.State())
	}
	if err := r.SelectVFO(2); !errors.Is(err, ErrVFO) {
		t.Fatalf("SelectVFO(2) = %v", err)
	}
}

func TestPowerLimits(t *testing.T) {
	r := newRadio(t, Opts{MaxPower: 10 * W}) // a low-power radio
	for _, tc := range []struct {
		p  physic.Power
		ok bool
	}{{0, true}, {10 * W, true}, {5 * W, true}, {10*W + physic.MilliWatt, false}, {-W, false}} {
		err := r.SetPower(tc.p)
		if tc.ok != (err == nil) || (err != nil && !errors.Is(err, ErrPowerRange)) {
			t.Errorf("SetPower(%s) = %v", tc.p, err)
		}
	}
	if r.Power() != 5*W {
		t.Fatalf("power %s, want the last accepted 5 W", r.Power())
	}
	ctx := context.Background()
	for _, p := range []physic.Power{0, 11 * W, -W} {
		if err := r.Key(ctx, p); !errors.Is(err, ErrPowerRange) {
			t.Errorf("Key(%s) = %v, want ErrPowerRange", p, err)
		}
	}
	if r.Transmitting() {
		t.Fatal("a refused Key transmits")
	}
	if _, err := New(Opts{MaxPower: 10 * W, Power: 20 * W}); err == nil {
		t.Fatal("New accepted a power setting above MaxPower")
	}
}

func TestKeyGivesSteadyCarrier(t *testing.T) {
	r := newRadio(t, Opts{})
	ctx := context.Background()
	for _, m := range []Mode{USB, CW, FM} { // the tune carrier does not depend on the mode
		if err := r.SetMode(m); err != nil {
			t.Fatal(err)
		}
		if err := r.Key(ctx, 20*W); err != nil {
			t.Fatal(err)
		}
		if on, p := r.Carrier(); !on || p != 20*W {
			t.Errorf("%s: keyed at 20 W, carrier %v %s", m, on, p)
		}
	}
	if err := r.Key(ctx, 35*W); err != nil {
		t.Fatal(err)
	}
	if _, p := r.Carrier(); p != 35*W {
		t.Fatalf("re-keying at 35 W gives %s", p)
	}
	if r.Power() != 100*W {
		t.Fatalf("keying changed the power setting to %s", r.Power())
	}
	if err := r.Unkey(ctx); err != nil {
		t.Fatal(err)
	}
	if on, _ := r.Carrier(); on || r.Transmitting() {
		t.Fatal("still transmitting after Unkey")
	}
	cancelled, cancel := context.WithCancel(ctx)
	cancel()
	if err := r.Key(cancelled, 10*W); !errors.Is(err, context.Canceled) {
		t.Fatalf("Key with an ended context = %v", err)
	}
}

func TestPTTCarrierDependsOnMode(t *testing.T) {
	cases := []struct {
		mode Mode
		want physic.Power
		why  string
	}{
		{USB, 0, "suppressed carrier, no audio: nothing on the air (common practice)"},
		{LSB, 0, "suppressed carrier, no audio (common practice)"},
		{CW, 0, "PTT without the key sends nothing (common practice)"},
		{Data, 0, "no audio tones from the data input"},
		{FM, 60 * W, "FM's carrier is constant at the set power (common practice)"},
		{AM, 15 * W, "AM carrier is a quarter of the 60 W peak envelope power at 100 % modulation (common practice)"},
	}
	r := newRadio(t, Opts{Power: 60 * W})
	for _, tc := range cases {
		if err := r.SetMode(tc.mode); err != nil {
			t.Fatal(err)
		}
		if err := r.PTT(true); err != nil {
			t.Fatal(err)
		}
		on, p := r.Carrier()
		if on != (tc.want > 0) || p != tc.want || !r.Transmitting() {
			t.Errorf("%s: PTT carrier %v %s, want %s (%s)", tc.mode, on, p, tc.want, tc.why)
		}
		if err := r.PTT(false); err != nil {
			t.Fatal(err)
		}
	}
	if err := r.SetMode(0); !errors.Is(err, ErrMode) {
		t.Fatalf("SetMode(0) = %v", err)
	}
}

func TestNoTuningOutOfBandWhileTransmitting(t *testing.T) {
	r := newRadio(t, Opts{GeneralCoverage: true, FreqB: 9500 * kHz})
	if err := r.Key(context.Background(), 10*W); err != nil {
		t.Fatal(err)
	}
	if err := r.SetFrequency(9500 * kHz); !errors.Is(err, ErrNoTransmit) {
		t.Fatalf("tuning out of band while keyed = %v", err)
	}
	if err := r.SelectVFO(VFOB); !errors.Is(err, ErrNoTransmit) {
		t.Fatalf("switching to an out-of-band VFO while keyed = %v", err)
	}
	if r.Frequency() != 14200*kHz || r.VFO() != VFOA {
		t.Fatalf("refused changes moved the radio: %+v", r.State())
	}
}

func TestSwitchOffAndHalt(t *testing.T) {
	r := newRadio(t, Opts{})
	ctx := context.Background()
	if err := r.Key(ctx, 10*W); err != nil {
		t.Fatal(err)
	}
	r.SwitchOff()
	if on, _ := r.Carrier(); on || r.Transmitting() {
		t.Fatal("a radio switched off still transmits")
	}
	if err := r.SetFrequency(7 * MHz); !errors.Is(err, ErrOff) {
		t.Fatalf("SetFrequency while off = %v", err)
	}
	if err := r.Key(ctx, 10*W); !errors.Is(err, ErrOff) {
		t.Fatalf("Key while off = %v", err)
	}
	if err := r.Unkey(ctx); err != nil {
		t.Fatalf("Unkey while off = %v", err)
	}
	if err := r.Halt(); err != nil {
		t.Fatalf("Halt while off = %v", err)
	}
	r.SwitchOn()
	if r.Frequency() != 14200*kHz || r.Transmitting() {
		t.Fatalf("after switching on: %+v", r.State())
	}
	if err := r.Key(ctx, 10*W); err != nil {
		t.Fatal(err)
	}
	if err := r.Halt(); err != nil || r.Transmitting() {
		t.Fatalf("Halt = %v, transmitting %v", err, r.Transmitting())
	}
}

func TestSubscriptionReportsChanges(t *testing.T) {
	r := newRadio(t, Opts{})
	sub := r.Subscribe(8)
	defer sub.Close()
	if err := r.SetFrequency(14074 * kHz); err != nil {
		t.Fatal(err)
	}
	if err := r.SetFrequency(14074 * kHz); err != nil { // no change, no event
		t.Fatal(err)
	}
	if err := r.SetMode(CW); err != nil {
		t.Fatal(err)
	}
	if err := r.Key(context.Background(), 5*W); err != nil {
		t.Fatal(err)
	}
	r.SwitchOff()
	want := []struct {
		c   Change
		chk func(State) bool
	}{
		{ChangedFreqA, func(s State) bool { return s.FreqA == 14074*kHz }},
		{ChangedMode, func(s State) bool { return s.Mode == CW }},
		{ChangedTX, func(s State) bool { return s.TX && s.Tune && s.TunePower == 5*W }},
		{ChangedTX | ChangedSwitch, func(s State) bool { return !s.On && !s.TX }},
	}
	for i, w := range want {
		ev := <-sub.Events() // already queued: the radio delivers before returning
		if ev.Changed != w.c || !w.chk(ev.State) {
			t.Errorf("event %d: %b %+v, want changes %b", i, ev.Changed, ev.State, w.c)
		}
	}
	select {
	case ev := <-sub.Events():
		t.Fatalf("unexpected event %+v", ev)
	default:
	}
}

func TestSubscriptionDropsOldest(t *testing.T) {
	r := newRadio(t, Opts{})
	sub := r.Subscribe(2)
	freqs := []physic.Frequency{14010 * kHz, 14020 * kHz, 14030 * kHz, 14040 * kHz, 14050 * kHz}
	for _, f := range freqs { // nobody reads: the radio must not block
		if err := r.SetFrequency(f); err != nil {
			t.Fatal(err)
		}
	}
	if d := sub.Dropped(); d != uint64(len(freqs)-2) {
		t.Fatalf("dropped %d, want %d", d, len(freqs)-2)
	}
	for _, want := range freqs[len(freqs)-2:] {
		if ev := <-sub.Events(); ev.State.FreqA != want {
			t.Fatalf("kept event at %s, want the newest ones (%s)", ev.State.FreqA, want)
		}
	}
	sub.Close()
	sub.Close() // twice is harmless
	if err := r.SetFrequency(14060 * kHz); err != nil {
		t.Fatal(err)
	}
	if _, ok := <-sub.Events(); ok {
		t.Fatal("an event arrived after Close")
	}
}

func TestStrings(t *testing.T) {
	if USB.String() != "USB" || DataReverse.String() != "DATA-R" || Mode(0).String() != "Mode(0)" {
		t.Errorf("mode names %q %q %q", USB, DataReverse, Mode(0))
	}
	if VFOA.String() != "A" || VFOB.String() != "B" || VFO(3).String() != "VFO(3)" {
		t.Errorf("VFO names %q %q %q", VFOA, VFOB, VFO(3))
	}
}

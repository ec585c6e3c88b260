package mech

import (
	"errors"
	"math"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/sim/vclock"
)

var (
	_ motion.Drive  = (*Mechanics)(nil)
	_ motion.Switch = (*Switch)(nil)
)

func newMech(t testing.TB, o Options) (*Mechanics, *vclock.Clock) {
	t.Helper()
	clk := vclock.New(vclock.Epoch)
	m, err := New(clk, o)
	if err != nil {
		t.Fatal(err)
	}
	if err := m.Enable(true); err != nil {
		t.Fatal(err)
	}
	return m, clk
}

// move runs n pulses in dir at speed and accel to the end, querying the shaft every query
// (0: only at the end).
func move(t testing.TB, m *Mechanics, clk *vclock.Clock, dir motion.Direction, n int64, speed, accel float64, query time.Duration) {
	t.Helper()
	p, err := motion.Plan(n, speed, accel)
	if err != nil {
		t.Fatal(err)
	}
	if err := m.Start(motion.Move{Dir: dir, Profile: p}); err != nil {
		t.Fatal(err)
	}
	end := clk.Now().Add(p.Duration())
	if query > 0 {
		for clk.Now().Before(end) {
			clk.Advance(query)
			m.Shaft()
		}
	}
	if d := end.Sub(clk.Now()); d > 0 {
		clk.Advance(d)
	}
	if emitted, running := m.Progress(); running || emitted != p.Total() {
		t.Fatalf("move of %d: emitted %d, running %v", n, emitted, running)
	}
}

func TestPulsesPerTurn(t *testing.T) {
	m, _ := newMech(t, Options{})
	// 200 full steps · 16 microsteps · 50:1 gear (the documented defaults, multiplied out).
	if got := m.PulsesPerTurn(); got != 160000 {
		t.Fatalf("PulsesPerTurn = %d, want 160000", got)
	}
	m, _ = newMech(t, Options{StepsPerRev: 400, Microsteps: 8, GearRatio: 3})
	if got := m.PulsesPerTurn(); got != 9600 {
		t.Fatalf("PulsesPerTurn = %d, want 400·8·3 = 9600", got)
	}
}

func TestOptionsRejected(t *testing.T) {
	clk := vclock.New(vclock.Epoch)
	for _, o := range []Options{
		{Backlash: -1},
		{MissRate: 1},
		{OverLimitLoss: 1.5},
		{HardStops: true, StopMin: 10, StopMax: 0},
		{HardStops: true, StopMin: 10, StopMax: 100, Start: 0},
		{Home: &SwitchOptions{Side: 3}},
		{SlipMax: -4},
	} {
		if _, err := New(clk, o); err == nil {
			t.Errorf("New accepted %+v", o)
		}
	}
}

func TestBacklashDeadbandIsExact(t *testing.T) {
	const b = 40
	m, clk := newMech(t, Options{Backlash: b})
	step := func(dir motion.Direction, n int64) float64 {
		move(t, m, clk, dir, n, 2000, 10000, 0)
		return m.Shaft()
	}
	up := step(motion.Up, 1000)
	if want := 1000.0 - b/2; up != want { // centred play: the shaft trails by half the play
		t.Fatalf("after 1000 up the shaft is at %v, want %v", up, want)
	}
	if s := step(motion.Down, b); s != up {
		t.Fatalf("reversing by the backlash (%d) moved the shaft from %v to %v", b, up, s)
	}
	if s := step(motion.Down, 1); s != up-1 {
		t.Fatalf("one pulse past the backlash: shaft %v, want %v", s, up-1)
	}
	down := m.Shaft()
	if s := step(motion.Up, b); s != down {
		t.Fatalf("reversing up by the backlash moved the shaft from %v to %v", down, s)
	}
	if s := step(motion.Up, 10); s != down+10 {
		t.Fatalf("10 pulses past the backlash: shaft %v, want %v", s, down+10)
	}
	if m.LostSteps() != 0 || m.MotorPosition() != 1000-b-1+b+10 {
		t.Fatalf("lost %d, motor %d", m.LostSteps(), m.MotorPosition())
	}
}

func TestMissRateMatchesBinomial(t *testing.T) {
	const (
		n = 200000
		q = 0.01
	)
	m, clk := newMech(t, Options{Seed: 42, MissRate: q})
	move(t, m, clk, motion.Up, n, 4000, 20000, 0)
	lost := m.LostSteps()
	// Binomial(n, q): mean n·q, standard deviation sqrt(n·q·(1−q)) (textbook); allow 4σ.
	mean, sd := float64(n)*q, math.Sqrt(float64(n)*q*(1-q))
	if math.Abs(float64(lost)-mean) > 4*sd {
		t.Fatalf("lost %d of %d pulses at rate %v, want %.0f ± %.0f", lost, n, q, mean, 4*sd)
	}
	if m.MotorPosition() != n-lost {
		t.Fatalf("motor at %d, want %d − %d", m.MotorPosition(), n, lost)
	}
}

func TestNoLossWithinLimits(t *testing.T) {
	m, clk := newMech(t, Options{Seed: 1, PulloutSpeed: 5000, MaxAccel: 30000})
	for range 20 {
		move(t, m, clk, motion.Up, 30000, 4999, 29999, time.Millisecond)
		move(t, m, clk, motion.Down, 30000, 4999, 29999, 0)
	}
	if m.LostSteps() != 0 || m.MotorPosition() != 0 {
		t.Fatalf("lost %d pulses within the limits (motor at %d)", m.LostSteps(), m.MotorPosition())
	}
}

func TestOverLimitLoss(t *testing.T) {
	t.Run("above pull-out", func(t *testing.T) {
		const loss = 0.5
		m, clk := newMech(t, Options{Seed: 7, PulloutSpeed: 1000, OverLimitLoss: loss})
		move(t, m, clk, motion.Up, 20000, 3000, 10000, 3*time.Millisecond)
		// Speed passes 1000 steps/s at s = v²/2a = 50 steps from either end (textbook
		// kinematics): 19900 pulses are too fast, each lost with chance 0.5; binomial spread.
		over := 20000.0 - 2*50
		mean, sd := over*loss, math.Sqrt(over*loss*(1-loss))
		if lost := float64(m.LostSteps()); math.Abs(lost-mean) > 4*sd+2 {
			t.Fatalf("lost %v, want %.0f ± %.0f", lost, mean, 4*sd+2)
		}
	})
	t.Run("steep ramps", func(t *testing.T) {
		const loss = 0.3
		m, clk := newMech(t, Options{Seed: 8, MaxAccel: 5000, OverLimitLoss: loss})
		for range 100 {
			move(t, m, clk, motion.Up, 1000, 900, 10000, 0)
		}
		// Each ramp covers v²/2a = 900²/20000 = 40.5 steps (textbook kinematics); two per
		// move, 100 moves; binomial spread, +2 per move for the ends of the ramps.
		ramps := 100 * 2 * 40.5
		mean, sd := ramps*loss, math.Sqrt(ramps*loss*(1-loss))
		if lost := float64(m.LostSteps()); math.Abs(lost-mean) > 4*sd+2*100*loss {
			t.Fatalf("lost %v, want %.0f ± %.0f", lost, mean, 4*sd+2*100*loss)
		}
	})
}

func TestLossDoesNotDependOnQueries(t *testing.T) {
	run := func(query time.Duration) (int64, int64, float64) {
		m, clk := newMech(t, Options{Seed: 99, MissRate: 0.02, PulloutSpeed: 2000, Backlash: 30})
		move(t, m, clk, motion.Up, 50000, 3000, 8000, query)
		move(t, m, clk, motion.Down, 20000, 1500, 8000, query)
		return m.LostSteps(), m.MotorPosition(), m.Shaft()
	}
	l1, p1, s1 := run(0)
	l2, p2, s2 := run(137 * time.Microsecond)
	if l1 != l2 || p1 != p2 || s1 != s2 {
		t.Fatalf("queried once: lost %d, motor %d, shaft %v; queried often: %d, %d, %v", l1, p1, s1, l2, p2, s2)
	}
	if l1 == 0 {
		t.Fatal("no loss drawn at all")
	}
}

func TestSameSeedSameRun(t *testing.T) {
	run := func(seed uint64) []float64 {
		m, clk := newMech(t, Options{Seed: seed, MissRate: 0.01, Backlash: 50, RandomPlay: true,
			SlipOnRelease: true, SlipMax: 300, SettleAmplitude: 2})
		var out []float64
		for i := range 6 {
			move(t, m, clk, motion.Direction(1-2*(i%2)), int64(3000+1000*i), 3000, 20000, 0)
			clk.Advance(5 * time.Millisecond)
			out = append(out, m.Shaft(), float64(m.MotorPosition()), float64(m.LostSteps()))
			if err := m.Enable(false); err != nil {
				t.Fatal(err)
			}
			if err := m.Enable(true); err != nil {
				t.Fatal(err)
			}
		}
		return out
	}
	a, b, c := run(5), run(5), run(6)
	same := func(x, y []float64) bool {
		for i := range x {
			if x[i] != y[i] {
				return false
			}
		}
		return true
	}
	if !same(a, b) {
		t.Fatalf("same seed, different runs:\n%v\n%v", a, b)
	}
	if same(a, c) {
		t.Fatal("different seeds gave the same run")
	}
}

func TestStallAtHardStop(t *testing.T) {
	const b = 20
	m, clk := newMech(t, Options{Backlash: b, HardStops: true, StopMin: -1000, StopMax: 5000})
	move(t, m, clk, motion.Up, 4000, 3000, 20000, 0)
	if m.Stalls() != 0 || m.LostSteps() != 0 {
		t.Fatalf("a move inside the stops stalled %d times, lost %d", m.Stalls(), m.LostSteps())
	}
	move(t, m, clk, motion.Up, 3000, 3000, 20000, time.Millisecond)
	// The shaft stops at 5000; the motor winds half the play further, the rest is lost.
	if s, p := m.Shaft(), m.MotorPosition(); s != 5000 || p != 5000+b/2 {
		t.Fatalf("against the stop: shaft %v, motor %d; want 5000, %d", s, p, 5000+b/2)
	}
	if got, want := m.LostSteps(), int64(4000+3000-(5000+b/2)); got != want || m.Stalls() != 1 || m.StalledPulses() != want {
		t.Fatalf("lost %d (want %d), %d stalls (want 1), %d stalled pulses (want %d)", got, want, m.Stalls(), m.StalledPulses(), want)
	}
	move(t, m, clk, motion.Down, 100, 3000, 20000, 0)
	if s := m.Shaft(); s != 5000+b/2-100+b/2 {
		t.Fatalf("backing off: shaft %v", s)
	}
	move(t, m, clk, motion.Up, 500, 3000, 20000, 0)
	// 100 down and 500 up from the motor at 5000+b/2: the first 100 wind back to it, 400 stall.
	if want := int64(4000+3000-(5000+b/2)) + 400; m.Stalls() != 2 || m.StalledPulses() != want {
		t.Fatalf("second drive into the stop: %d stalls, want 2; %d stalled pulses, want %d", m.Stalls(), m.StalledPulses(), want)
	}
}

func TestSwitchHysteresis(t *testing.T) {
	m, clk := newMech(t, Options{Home: &SwitchOptions{At: -500, Side: motion.Down, Hysteresis: 30},
		Upper: &SwitchOptions{At: 800, Side: motion.Up}})
	sw := m.Switches()
	if sw.Lower != nil {
		t.Fatal("an absent switch is not a nil interface")
	}
	active := func(s motion.Switch) bool {
		on, err := s.Active()
		if err != nil {
			t.Fatal(err)
		}
		return on
	}
	steps := []struct {
		dir    motion.Direction
		n      int64
		home   bool // the home switch's state after the step
		reason string
	}{
		{motion.Down, 499, false, "at -499, short of the point"},
		{motion.Down, 1, true, "at -500, on the point"},
		{motion.Up, 29, true, "at -471, inside the 30-step hysteresis"},
		{motion.Up, 1, true, "at -470, on its edge"},
		{motion.Up, 1, false, "at -469, past it"},
		{motion.Down, 30, false, "at -499, not yet back at the point"},
		{motion.Down, 5, true, "at -504"},
	}
	for _, s := range steps {
		move(t, m, clk, s.dir, s.n, 1000, 10000, 0)
		if got := active(sw.Home); got != s.home {
			t.Fatalf("%s: home switch %v, want %v", s.reason, got, s.home)
		}
	}
	if active(sw.Upper) {
		t.Fatal("upper switch active far below its point")
	}
	move(t, m, clk, motion.Up, 1304, 3000, 20000, time.Millisecond)
	if !active(sw.Upper) || active(sw.Home) {
		t.Fatalf("at 800: upper %v, home %v", active(sw.Upper), active(sw.Home))
	}

	stuck, _ := newMech(t, Options{Home: &SwitchOptions{At: -500, StuckActive: true}})
	dead, clk2 := newMech(t, Options{Home: &SwitchOptions{At: -500, NeverActive: true}})
	move(t, dead, clk2, motion.Down, 1000, 3000, 20000, 0)
	if !active(stuck.Switches().Home) || active(dead.Switches().Home) {
		t.Fatal("stuck or dead knob ignored")
	}
}

func TestRingingDecays(t *testing.T) {
	const amp = 3.0
	settle := 40 * time.Millisecond
	m, clk := newMech(t, Options{SettleAmplitude: amp, SettleTime: settle})
	move(t, m, clk, motion.Up, 2000, 3000, 20000, 0)
	rest := float64(m.MotorPosition())
	var early, late float64
	for dt := time.Duration(0); dt < 2*settle; dt += 250 * time.Microsecond {
		dev := math.Abs(m.Shaft() - rest)
		switch {
		case dt < settle/4:
			early = math.Max(early, dev)
		case dt >= settle:
			late = math.Max(late, dev)
		}
		clk.Advance(250 * time.Microsecond)
	}
	// The ring must be visible early (over half its amplitude) and below 0.05 step from
	// SettleTime on, as the options document it.
	if early < amp/2 || late >= 0.05 {
		t.Fatalf("ring peaked at %v early (want > %v) and %v late (want < 0.05)", early, amp/2, late)
	}
	if m.Shaft() != rest {
		t.Fatalf("shaft at rest %v, want %v", m.Shaft(), rest)
	}
}

func TestDriveRules(t *testing.T) {
	clk := vclock.New(vclock.Epoch)
	m, err := New(clk, Options{SlipOnRelease: true, SlipMax: 50, Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	p, _ := motion.Plan(1000, 2000, 10000)
	if err := m.Start(motion.Move{Dir: motion.Up, Profile: p}); !errors.Is(err, ErrDisabled) {
		t.Fatalf("Start while released = %v, want ErrDisabled", err)
	}
	if err := m.Enable(true); err != nil {
		t.Fatal(err)
	}
	if err := m.Start(motion.Move{Dir: motion.Up, Profile: p}); err != nil {
		t.Fatal(err)
	}
	if err := m.Start(motion.Move{Dir: motion.Up, Profile: p}); !errors.Is(err, ErrBusy) {
		t.Fatalf("second Start = %v, want ErrBusy", err)
	}
	clk.Advance(300 * time.Millisecond)
	m.Stop(true)
	want := p.StopAt(300 * time.Millisecond)
	clk.Advance(time.Second)
	if got, running := m.Progress(); running || got != want.Total() || got >= p.Total() {
		t.Fatalf("after a ramped stop: %d pulses, running %v; want %d", got, running, want.Total())
	}
	before := m.MotorPosition()
	if err := m.Enable(false); err != nil {
		t.Fatal(err)
	}
	slip := m.MotorPosition() - before
	if slip < -50 || slip > 50 || m.Shaft()-float64(before) != float64(slip) {
		t.Fatalf("slip on release %d (shaft %v), want within ±50 and shaft with motor", slip, m.Shaft())
	}
	m.Slip(-123)
	if got := m.MotorPosition() - before - slip; got != -123 {
		t.Fatalf("Slip(-123) moved the motor by %d", got)
	}
	if m.Moving() {
		t.Fatal("moving while released")
	}
}

func BenchmarkShaft(b *testing.B) {
	m, clk := newMech(b, Options{Seed: 1, MissRate: 1e-3, Backlash: 40, SettleAmplitude: 2})
	p, err := motion.Plan(100000, 4000, 20000)
	if err != nil {
		b.Fatal(err)
	}
	dir := motion.Up
	var sink float64
	for b.Loop() {
		if !m.Moving() {
			if err := m.Start(motion.Move{Dir: dir, Profile: p}); err != nil {
				b.Fatal(err)
			}
			dir = -dir
		}
		clk.Advance(100 * time.Microsecond) // a 10 kS/s ADC
		sink += m.Shaft()
	}
	_ = sink
}

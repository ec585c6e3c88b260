package mech

import (
	"testing"
	"time"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/sim/vclock"
)

// loaded is a pulse generator on a busy board: one wake-up in a hundred late, by 1 ms on
// average, never more than 5 ms (from memory: the order of a non-real-time kernel's scheduling
// latency under load).
var loaded = vclock.Lateness{Seed: 21, P: 0.01, Mean: time.Millisecond, Max: 5 * time.Millisecond, Shape: 2.5}

func TestPulseTimeInvertsStepsAt(t *testing.T) {
	trap, _ := motion.Plan(20000, 4000, 20000)
	tri, _ := motion.Plan(300, 4000, 20000)
	for _, p := range []motion.Profile{trap, tri, trap.StopAt(100 * time.Millisecond), trap.StopAt(2 * time.Second), tri.StopAt(50 * time.Millisecond)} {
		for k := int64(1); k <= p.Total(); k++ {
			// The first nanosecond at which StepsAt counts pulse k, by bisection.
			lo, hi := time.Duration(0), p.Duration()
			for lo < hi {
				mid := lo + (hi-lo)/2
				if p.StepsAt(mid) >= k {
					hi = mid
				} else {
					lo = mid + 1
				}
			}
			// Within a microsecond: float rounding where the ramp is flat; a microsecond is a
			// hundredth of a pulse at these speeds, nothing beside a millisecond's lateness.
			if at := pulseTime(p, k); at < lo-time.Microsecond || at > lo+time.Microsecond {
				t.Fatalf("%+v: pulse %d planned at %v, StepsAt counts it from %v", p, k, at, lo)
			}
		}
	}
}

// jitterRun starts a move of n pulses with the given jitter and queries Progress every q until
// it ends, checking the model's bounds at every query: never ahead of the plan, never behind
// what the plan had emitted l.Cap() earlier. It returns the counts seen, the instant the move
// was seen to end, and the largest lag behind the plan.
func jitterRun(t *testing.T, l vclock.Lateness, dir motion.Direction, n int64, q time.Duration, stopAt time.Duration) (counts []int64, ended time.Duration, maxLag int64, m *Mechanics, p motion.Profile) {
	t.Helper()
	m, clk := newMech(t, Options{Seed: 3, StepJitter: l, Backlash: 30})
	p, err := motion.Plan(n, 8000, 40000)
	if err != nil {
		t.Fatal(err)
	}
	if err := m.Start(motion.Move{Dir: dir, Profile: p}); err != nil {
		t.Fatal(err)
	}
	t0 := clk.Now()
	stopped := false
	for {
		clk.Advance(q)
		el := clk.Since(t0)
		if stopAt > 0 && !stopped && el >= stopAt {
			m.Stop(true)
			p = p.StopAt(el)
			stopped = true
		}
		e, running := m.Progress()
		counts = append(counts, e)
		plan := p.StepsAt(el)
		if e > plan || e < p.StepsAt(el-l.Cap()) {
			t.Fatalf("%v into the move: %d pulses out, plan %d, plan %v earlier %d", el, e, plan, l.Cap(), p.StepsAt(el-l.Cap()))
		}
		maxLag = max(maxLag, plan-e)
		if !running {
			return counts, el, maxLag, m, p
		}
		if el > time.Minute {
			t.Fatal("the move never ended")
		}
	}
}

func TestStepJitterKeepsEveryPulse(t *testing.T) {
	for _, c := range []struct {
		dir    motion.Direction
		n      int64
		stopAt time.Duration
	}{
		{motion.Up, 30000, 0},
		{motion.Down, 700, 0},
		{motion.Up, 30000, 900 * time.Millisecond}, // a ramped stop at cruise
	} {
		_, ended, lag, m, p := jitterRun(t, loaded, c.dir, c.n, 250*time.Microsecond, c.stopAt)
		if got, want := m.MotorPosition(), int64(c.dir)*p.Total(); got != want {
			t.Errorf("%+v: the motor ended at %d, want %d: the plan's every pulse", c, got, want)
		}
		if m.LostSteps() != 0 || m.StalledPulses() != 0 {
			t.Errorf("%+v: %d pulses lost, %d stalled within the motor's limits", c, m.LostSteps(), m.StalledPulses())
		}
		// It ends no earlier than the plan and no later than the plan plus the cap, give or
		// take the query interval.
		if d := p.Duration(); ended < d || ended > d+loaded.Cap()+250*time.Microsecond {
			t.Errorf("%+v: ended %v into the move; plan %v, cap %v", c, ended, d, loaded.Cap())
		}
		if c.n > 10000 && lag == 0 {
			t.Errorf("%+v: never behind the plan at 1 %% late wake-ups", c)
		}
		t.Logf("%+v: largest lag %d pulses, ended %v after the plan", c, lag, ended-p.Duration())
	}
}

func TestStepJitterDoesNotDependOnQueries(t *testing.T) {
	a, _, _, ma, _ := jitterRun(t, loaded, motion.Up, 20000, 100*time.Microsecond, 0)
	b, _, _, mb, _ := jitterRun(t, loaded, motion.Up, 20000, 700*time.Microsecond, 0)
	// Every 7th query of the first run is at the same instant as one of the second.
	for i := range b {
		if j := 7*(i+1) - 1; j < len(a) && a[j] != b[i] {
			t.Fatalf("at %v: %d pulses queried often, %d queried seldom", time.Duration(i+1)*700*time.Microsecond, a[j], b[i])
		}
	}
	if ma.MotorPosition() != mb.MotorPosition() {
		t.Fatalf("motor at %d and %d", ma.MotorPosition(), mb.MotorPosition())
	}
	l := loaded
	l.Seed++
	c, _, _, _, _ := jitterRun(t, l, motion.Up, 20000, 100*time.Microsecond, 0)
	same := len(a) == len(c)
	for i := range min(len(a), len(c)) {
		same = same && a[i] == c[i]
	}
	if same {
		t.Fatal("seeds 21 and 22 held back the same pulses")
	}
}

func TestZeroStepJitterIsThePlan(t *testing.T) {
	// A zero chance of lateness installs nothing: the drive is exactly the one without the
	// option, pulse for pulse at every query.
	counts, _, lag, m, _ := jitterRun(t, vclock.Lateness{Seed: 9}, motion.Up, 20000, 100*time.Microsecond, 0)
	if m.jit != nil || lag != 0 {
		t.Fatalf("zero step jitter: installed %v, lagged the plan by %d", m.jit != nil, lag)
	}
	plain, clk := newMech(t, Options{Seed: 3, Backlash: 30})
	p, _ := motion.Plan(20000, 8000, 40000)
	if err := plain.Start(motion.Move{Dir: motion.Up, Profile: p}); err != nil {
		t.Fatal(err)
	}
	for i, want := range counts {
		clk.Advance(100 * time.Microsecond)
		if e, _ := plain.Progress(); e != want {
			t.Fatalf("query %d: %d pulses without the option, %d with a zero one", i, e, want)
		}
	}
	if err := m.UseStepJitter(loaded); err != nil {
		t.Fatal(err)
	}
	if err := m.UseStepJitter(vclock.Lateness{}); err != nil || m.jit != nil {
		t.Fatalf("UseStepJitter(zero) = %v, still installed %v", err, m.jit != nil)
	}
}

func TestUseStepJitterRules(t *testing.T) {
	m, clk := newMech(t, Options{})
	if err := m.UseStepJitter(vclock.Lateness{P: 2}); err == nil {
		t.Error("a lateness chance of 2 accepted")
	}
	p, _ := motion.Plan(1000, 2000, 20000)
	if err := m.Start(motion.Move{Dir: motion.Up, Profile: p}); err != nil {
		t.Fatal(err)
	}
	clk.Advance(time.Millisecond)
	if err := m.UseStepJitter(loaded); err == nil {
		t.Error("step jitter changed during a move")
	}
	if _, err := New(clk, Options{StepJitter: vclock.Lateness{P: 0.5}}); err == nil {
		t.Error("New accepted a lateness chance without a mean")
	}
}

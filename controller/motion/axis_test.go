package motion

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

var _ Drive = (*fakeDrive)(nil)

// rig is an axis on a fake drive, enabled and referenced at 0 unless told otherwise.
type rig struct {
	clk          *clock.Virtual
	d            *fakeDrive
	a            *Axis
	lower, upper *fakeSwitch
}

func testOptions() Options {
	return Options{Min: -1000, Max: 10000, MaxSpeed: 2000, Accel: 10000, Settle: 10 * time.Millisecond, Poll: time.Millisecond}
}

func newRig(t *testing.T, o Options, home Switch) *rig {
	t.Helper()
	clk := clock.NewVirtual(epoch)
	r := &rig{clk: clk, d: newFakeDrive(clk), lower: &fakeSwitch{name: "lower"}, upper: &fakeSwitch{name: "upper"}}
	a, err := NewAxis(r.d, clk, Switches{Home: home, Lower: r.lower, Upper: r.upper}, o)
	if err != nil {
		t.Fatal(err)
	}
	r.a = a
	if err := a.Enable(context.Background()); err != nil {
		t.Fatal(err)
	}
	return r
}

func newReferencedRig(t *testing.T, o Options) *rig {
	r := newRig(t, o, nil)
	r.a.Reference(0)
	return r
}

func TestNewAxisReportsEveryBadOption(t *testing.T) {
	_, err := NewAxis(newFakeDrive(clock.NewVirtual(epoch)), clock.NewVirtual(epoch), Switches{},
		Options{Min: 5, Max: 5, MaxSpeed: -1, Backlash: -3, Approach: 2})
	if err == nil {
		t.Fatal("NewAxis accepted bad options")
	}
	for _, key := range []string{"Max", "MaxSpeed", "Backlash", "Approach"} {
		if !strings.Contains(err.Error(), key+" = ") {
			t.Errorf("error %q does not name %s", err, key)
		}
	}
	if _, err := NewAxis(nil, clock.NewVirtual(epoch), Switches{}, testOptions()); err == nil {
		t.Error("NewAxis accepted a nil drive")
	}
}

func TestMovesNeedEnableAndTrust(t *testing.T) {
	ctx := context.Background()
	clk := clock.NewVirtual(epoch)
	d := newFakeDrive(clk)
	a, err := NewAxis(d, clk, Switches{}, testOptions())
	if err != nil {
		t.Fatal(err)
	}
	if err := a.MoveTo(ctx, 100, 0); !errors.Is(err, ErrDisabled) {
		t.Fatalf("move before Enable = %v, want ErrDisabled", err)
	}
	if err := a.Enable(ctx); err != nil {
		t.Fatal(err)
	}
	if err := a.MoveTo(ctx, 100, 0); !errors.Is(err, ErrUntrusted) {
		t.Fatalf("move before Reference = %v, want ErrUntrusted", err)
	}
	if err := a.Approach(ctx, 100); !errors.Is(err, ErrUntrusted) {
		t.Fatalf("approach before Reference = %v, want ErrUntrusted", err)
	}
	if d.starts != 0 {
		t.Fatalf("drive started %d times without a trusted position", d.starts)
	}
	a.Reference(50)
	if err := a.MoveTo(ctx, 100, 0); err != nil {
		t.Fatal(err)
	}
	if a.Position() != 100 || d.net != 50 {
		t.Fatalf("after 50 → 100: position %d, drive emitted %+d", a.Position(), d.net)
	}
}

func TestSoftLimitsRefusedNotClamped(t *testing.T) {
	ctx := context.Background()
	r := newReferencedRig(t, testOptions())
	for _, target := range []Steps{10001, -1001, 1 << 40} {
		if err := r.a.MoveTo(ctx, target, 0); !errors.Is(err, ErrSoftLimit) {
			t.Errorf("MoveTo(%d) = %v, want ErrSoftLimit", target, err)
		}
		if err := r.a.Approach(ctx, target); !errors.Is(err, ErrSoftLimit) {
			t.Errorf("Approach(%d) = %v, want ErrSoftLimit", target, err)
		}
	}
	if r.d.starts != 0 || r.a.Position() != 0 {
		t.Fatalf("refused moves moved: %d starts, position %d", r.d.starts, r.a.Position())
	}
	for _, target := range []Steps{10000, -1000} {
		if err := r.a.MoveTo(ctx, target, 0); err != nil {
			t.Fatalf("MoveTo(%d) on the limit: %v", target, err)
		}
	}
	if r.a.Position() != -1000 || r.d.net != -1000 {
		t.Fatalf("position %d, drive %+d, want -1000", r.a.Position(), r.d.net)
	}
}

func TestBookkeepingCountsEmittedPulses(t *testing.T) {
	ctx := context.Background()
	r := newReferencedRig(t, testOptions())
	if err := r.a.Start(8000, 0); err != nil {
		t.Fatal(err)
	}
	if err := r.a.Start(100, 0); !errors.Is(err, ErrBusy) {
		t.Fatalf("second Start = %v, want ErrBusy", err)
	}
	r.clk.Advance(time.Second)
	if err := r.a.StopMove(ctx); err != nil {
		t.Fatal(err)
	}
	// 2000 steps/s at 10000 steps/s²: 200 steps of ramp, then 2000·0.8 = 1600 steps in the
	// first second, and another 200 to stop (textbook s = v²/2a).
	if got := r.a.Position(); got != r.d.net || got != 2000 {
		t.Fatalf("stopped at %d, drive emitted %d; want both 2000", got, r.d.net)
	}
	if r.d.ramped != 1 || r.d.abrupt != 0 {
		t.Fatalf("stop was ramped %d, abrupt %d times; want one ramped", r.d.ramped, r.d.abrupt)
	}
	if !r.a.Trusted() {
		t.Fatal("a controlled stop lost the position")
	}
	if s := r.a.Snapshot(); s.Moving || s.Target != 8000 || s.Play != Up {
		t.Fatalf("snapshot %+v", s)
	}
}

func TestSettleAfterEveryMove(t *testing.T) {
	ctx := context.Background()
	o := testOptions()
	o.Settle = 300 * time.Millisecond
	r := newReferencedRig(t, o)
	p, _ := Plan(1000, o.MaxSpeed, o.Accel)
	start := r.clk.Now()
	if err := r.a.MoveTo(ctx, 1000, 0); err != nil {
		t.Fatal(err)
	}
	took := r.clk.Since(start)
	if took < p.Duration()+o.Settle || took > p.Duration()+o.Settle+2*o.Poll {
		t.Fatalf("move took %v, want its %v plus the %v settle (within a poll)", took, p.Duration(), o.Settle)
	}
	start = r.clk.Now()
	if err := r.a.MoveTo(ctx, 1000, 0); err != nil {
		t.Fatal(err)
	}
	if took := r.clk.Since(start); took != 0 {
		t.Fatalf("a move to where the axis stands took %v", took)
	}
}

func TestWaitCancelledStopsWithARamp(t *testing.T) {
	r := newReferencedRig(t, testOptions())
	if err := r.a.Start(9000, 0); err != nil {
		t.Fatal(err)
	}
	r.clk.Advance(time.Second)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := r.a.Wait(ctx); !errors.Is(err, context.Canceled) {
		t.Fatalf("Wait = %v, want context.Canceled", err)
	}
	if r.d.ramped != 1 {
		t.Fatalf("a cancelled wait did not begin a ramped stop")
	}
	if err := r.a.Wait(context.Background()); err != nil {
		t.Fatal(err)
	}
	if r.a.Position() != 2000 || !r.a.Trusted() || r.a.Fault() != nil {
		t.Fatalf("after the stop: %+v", r.a.Snapshot())
	}
}

func TestFaultsStopTheMotorAndLatch(t *testing.T) {
	cases := []struct {
		name string
		// arm sets the fault up on a referenced, idle rig; mid says it strikes while moving.
		arm  func(r *rig)
		mid  bool
		want error
	}{
		{"drive start error", func(r *rig) { r.d.startErr = errors.New("gpio busy") }, false, ErrDrive},
		{"lower limit active before a down move", func(r *rig) { r.lower.on = true }, false, ErrLimitSwitch},
		{"upper limit trips during the move", func(r *rig) { r.upper.on = true }, true, ErrLimitSwitch},
		{"lower limit trips while moving up", func(r *rig) { r.lower.on = true }, true, ErrLimitSwitch},
		{"limit switch read error", func(r *rig) { r.upper.err = errors.New("i2c nack") }, true, ErrSwitchRead},
		{"drive emits extra pulses", func(r *rig) { r.d.extra = 3 }, false, ErrDrive},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ctx := context.Background()
			r := newReferencedRig(t, testOptions())
			target := Steps(5000)
			if c.name == "lower limit active before a down move" {
				target = -500
			}
			var err error
			if c.mid {
				if err := r.a.Start(target, 0); err != nil {
					t.Fatal(err)
				}
				r.clk.Advance(500 * time.Millisecond)
				c.arm(r)
				err = r.a.Wait(ctx)
				if r.d.abrupt != 1 {
					t.Fatalf("fault did not stop the motor at once (%d abrupt stops)", r.d.abrupt)
				}
			} else {
				c.arm(r)
				err = r.a.MoveTo(ctx, target, 0)
			}
			if !errors.Is(err, ErrFault) || !errors.Is(err, c.want) {
				t.Fatalf("error %v, want ErrFault and %v", err, c.want)
			}
			if r.d.running {
				t.Fatal("motor still running after a fault")
			}
			if got := r.a.Position(); got != r.d.net {
				t.Fatalf("position %d, drive emitted %d", got, r.d.net)
			}
			if f := r.a.Fault(); !errors.Is(f, c.want) {
				t.Fatalf("Fault() = %v", f)
			}
			r.lower.on, r.upper.on, r.upper.err, r.d.extra = false, false, nil, 0
			starts := r.d.starts
			for _, move := range []func() error{
				func() error { return r.a.MoveTo(ctx, 100, 0) },
				func() error { return r.a.Start(100, 0) },
				func() error { return r.a.Approach(ctx, 100) },
			} {
				if err := move(); !errors.Is(err, ErrFault) {
					t.Fatalf("move while latched = %v, want ErrFault", err)
				}
			}
			r.a.Reference(0) // does not clear the fault
			if err := r.a.MoveTo(ctx, 100, 0); !errors.Is(err, ErrFault) {
				t.Fatalf("move after Reference while latched = %v, want ErrFault", err)
			}
			if r.d.starts != starts {
				t.Fatal("a latched axis started the drive")
			}
			if err := r.a.Reset(); err != nil {
				t.Fatal(err)
			}
			if r.a.Trusted() {
				t.Fatal("position trusted after Reset")
			}
			if err := r.a.MoveTo(ctx, 100, 0); !errors.Is(err, ErrUntrusted) {
				t.Fatalf("move after Reset = %v, want ErrUntrusted", err)
			}
			r.a.Reference(0)
			if err := r.a.MoveTo(ctx, 100, 0); err != nil {
				t.Fatalf("move after Reset and Reference: %v", err)
			}
		})
	}
}

func TestEnableErrorLatches(t *testing.T) {
	clk := clock.NewVirtual(epoch)
	d := newFakeDrive(clk)
	d.enableErr = errors.New("driver undervoltage")
	a, err := NewAxis(d, clk, Switches{}, testOptions())
	if err != nil {
		t.Fatal(err)
	}
	if err := a.Enable(context.Background()); !errors.Is(err, ErrFault) || !errors.Is(err, ErrDrive) {
		t.Fatalf("Enable = %v, want ErrFault and ErrDrive", err)
	}
	if a.Snapshot().Enabled {
		t.Fatal("enabled despite the error")
	}
}

func TestDisableForgetsPlayAndMaybePosition(t *testing.T) {
	ctx := context.Background()
	for _, slip := range []bool{false, true} {
		o := testOptions()
		o.SlipWhenReleased = slip
		o.Backlash = 20
		r := newReferencedRig(t, o)
		if err := r.a.Start(5000, 0); err != nil {
			t.Fatal(err)
		}
		r.clk.Advance(200 * time.Millisecond)
		if err := r.a.Disable(ctx); err != nil {
			t.Fatal(err)
		}
		if r.d.ramped != 1 || r.d.enabled {
			t.Fatalf("slip %v: Disable mid-move: ramped stops %d, enabled %v", slip, r.d.ramped, r.d.enabled)
		}
		s := r.a.Snapshot()
		if s.Trusted == slip || s.Play != 0 || s.Enabled || s.Position != r.d.net {
			t.Fatalf("slip %v: after Disable %+v (drive %d)", slip, s, r.d.net)
		}
		if err := r.a.MoveTo(ctx, 0, 0); !errors.Is(err, ErrDisabled) {
			t.Fatalf("move while disabled = %v", err)
		}
	}
}

func TestHaltReleasesAndDistrustsAMove(t *testing.T) {
	r := newReferencedRig(t, testOptions())
	if err := r.a.Start(5000, 0); err != nil {
		t.Fatal(err)
	}
	r.clk.Advance(300 * time.Millisecond)
	if err := r.a.Halt(); err != nil {
		t.Fatal(err)
	}
	s := r.a.Snapshot()
	if r.d.halts != 1 || r.d.running || s.Moving || s.Enabled || s.Trusted || s.Position != r.d.net {
		t.Fatalf("after Halt: %+v, drive %+v", s, r.d)
	}
}

func TestApproachTakesUpThePlay(t *testing.T) {
	ctx := context.Background()
	o := testOptions()
	o.Backlash, o.ApproachMargin = 50, 10
	r := newReferencedRig(t, o)
	last := func() Move { return r.d.mv }
	cases := []struct {
		name        string
		target      Steps
		wantRunUp   bool
		wantLastLen int64
	}{
		{"from below, far", 2000, false, 2000},   // play unknown, but 2000 ≥ 50 up
		{"further up, short", 2010, false, 10},   // play already up
		{"from above", 1500, true, 60},           // run-up to 1500 − (50+10)
		{"same place", 1500, false, 60},          // nothing to do
		{"short hop up", 1520, false, 20},        // still loaded up
		{"near the lower limit", -990, true, 10}, // run-up clamped to -1000
	}
	for _, c := range cases {
		before := r.d.starts
		if err := r.a.Approach(ctx, c.target); err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		runUps := r.d.starts - before - 1
		if c.name == "same place" {
			runUps = r.d.starts - before
		}
		if (runUps == 1) != c.wantRunUp {
			t.Errorf("%s: %d run-ups, want %v", c.name, runUps, c.wantRunUp)
		}
		if m := last(); m.Dir != Up || m.Profile.Steps != c.wantLastLen {
			t.Errorf("%s: last move %s%d, want +%d", c.name, m.Dir, m.Profile.Steps, c.wantLastLen)
		}
		if r.a.Position() != c.target || r.d.net != c.target {
			t.Errorf("%s: at %d (drive %d)", c.name, r.a.Position(), r.d.net)
		}
	}
	if s := r.a.Snapshot(); s.Play != 0 {
		t.Errorf("after a clamped 10-step run-up the play is reported taken up (%v)", s.Play)
	}
	r.a.UseBacklash(5)
	if s := r.a.Snapshot(); s.Play != Up || s.Backlash != 5 {
		t.Errorf("after UseBacklash(5): %+v", s)
	}
}

// TestAxisPropertyNeverLeavesSoftLimits drives the axis with thousands of random calls and
// injected faults, and checks after each that the bookkeeping equals the pulses the drive
// emitted and that no pulse ever took the position outside the soft limits.
func TestAxisPropertyNeverLeavesSoftLimits(t *testing.T) {
	ctx := context.Background()
	o := testOptions()
	o.Min, o.Max, o.Backlash = -500, 3000, 40
	r := newRig(t, o, nil)
	a, d := r.a, r.d
	rng := rand.New(rand.NewPCG(2026, 1))
	var offset int64 // position = offset + d.net, fixed at every Reference
	referenced := false
	pulses := 0
	d.onPulse = func(net int64) {
		pulses++
		if !referenced {
			t.Fatalf("a pulse before any Reference")
		}
		if p := offset + net; p < o.Min || p > o.Max {
			t.Fatalf("a pulse took the position to %d, outside [%d, %d]", p, o.Min, o.Max)
		}
	}
	target := func() Steps { return o.Min - 300 + rng.Int64N(o.Max-o.Min+600) }
	speed := func() float64 { return []float64{0, 100, 1000, 5000}[rng.IntN(4)] }
	var faults, softRefusals, untrusted int
	for i := 0; i < 10000; i++ {
		wasFault, wasTrusted, starts := a.Fault() != nil, a.Trusted(), d.starts
		var err error
		isMove := false
		switch op := rng.IntN(200); {
		case op < 40:
			isMove, err = true, a.Start(target(), speed())
		case op < 70:
			isMove, err = true, a.MoveTo(ctx, target(), speed())
		case op < 100:
			isMove, err = true, a.Approach(ctx, target())
		case op < 110:
			err = a.StopMove(ctx)
		case op < 118:
			err = a.Disable(ctx)
		case op < 132:
			err = a.Enable(ctx)
		case op < 150:
			p := o.Min + rng.Int64N(o.Max-o.Min+1)
			a.Reference(p)
			offset, referenced = p-d.net, true
		case op < 158:
			err = a.Reset()
		case op < 178:
			r.clk.Advance(time.Duration(rng.Int64N(int64(300 * time.Millisecond))))
		case op < 184:
			_, _, err = a.Poll()
		case op < 188:
			sw := []*fakeSwitch{r.lower, r.upper}[rng.IntN(2)]
			sw.on = !sw.on
		case op < 189:
			d.startErr = errors.New("injected start failure")
		case op < 192:
			a.UseBacklash(rng.Int64N(100))
		case op < 193:
			err = a.Halt()
		case op < 194:
			a.Distrust("test")
		default:
			// A limit switch that tripped goes off again as the operator clears the cause.
			r.lower.on, r.upper.on = false, false
		}
		if errors.Is(err, ErrSoftLimit) {
			softRefusals++
		}
		if errors.Is(err, ErrUntrusted) {
			untrusted++
		}
		if isMove && wasFault && !errors.Is(err, ErrFault) {
			t.Fatalf("op %d: a move while latched returned %v, want ErrFault", i, err)
		}
		if isMove && (!wasTrusted || wasFault) && d.starts != starts {
			t.Fatalf("op %d: the drive started without a trusted position", i)
		}
		if !wasFault && a.Fault() != nil {
			faults++
			if d.running {
				t.Fatalf("op %d: fault %v but the motor runs", i, a.Fault())
			}
		}
		if _, _, err := a.Poll(); err != nil && !errors.Is(err, ErrFault) {
			t.Fatalf("op %d: Poll: %v", i, err)
		}
		if a.Fault() != nil && d.running {
			t.Fatalf("op %d: latched fault but the motor runs", i)
		}
		if got, want := a.Position(), offset+d.net; got != want {
			t.Fatalf("op %d: position %d, but the drive's pulses put it at %d", i, got, want)
		}
	}
	// The run must have exercised what it claims to.
	if pulses < 100000 || faults < 20 || softRefusals < 50 || untrusted < 20 {
		t.Fatalf("weak run: %d pulses, %d faults, %d soft-limit refusals, %d untrusted refusals", pulses, faults, softRefusals, untrusted)
	}
	t.Logf("%d pulses, %d faults, %d soft-limit refusals, %d untrusted refusals", pulses, faults, softRefusals, untrusted)
}

func TestHoming(t *testing.T) {
	ctx := context.Background()
	o := testOptions()
	o.Homing = HomingOptions{FastSpeed: 1000, SlowSpeed: 100, BackOff: 200, HomePosition: -900}
	// The mechanics' switch edge is at drive count 3000; the axis starts wherever the drive is,
	// at count 0, not knowing it.
	const edge = 3000
	cases := []struct {
		name     string
		start    int64 // drive count when homing begins
		stuck    bool
		dead     bool
		want     error
		maxTrvl  Steps
		noSwitch bool
	}{
		{name: "from above", start: 0},
		{name: "starting on the switch", start: -500},
		{name: "switch stuck", start: 0, stuck: true, want: ErrSwitchStuck},
		{name: "switch dead", start: 0, dead: true, want: ErrSwitchNeverTriggered},
		{name: "out of reach", start: 0, maxTrvl: 2000, want: ErrSwitchNeverTriggered},
		{name: "no switch", noSwitch: true, want: ErrNoHomeSwitch},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			clk := clock.NewVirtual(epoch)
			d := newFakeDrive(clk)
			d.net = edge + 4000 + c.start
			home := &edgeSwitch{d: d, at: edge, hyst: 30, stuck: c.stuck, dead: c.dead}
			home.Active() // initial state from where the mechanics stand
			sw := Switches{Home: home}
			if c.noSwitch {
				sw.Home = nil
			}
			oc := o
			oc.Homing.MaxTravel = c.maxTrvl
			a, err := NewAxis(d, clk, sw, oc)
			if err != nil {
				t.Fatal(err)
			}
			if err := a.Enable(ctx); err != nil {
				t.Fatal(err)
			}
			if c.start < 0 {
				d.net = edge - 10 // on the switch
				home.Active()
			}
			err = a.Home(ctx)
			if c.want != nil {
				if !errors.Is(err, c.want) {
					t.Fatalf("Home = %v, want %v", err, c.want)
				}
				if a.Trusted() || a.Fault() != nil {
					t.Fatalf("after a failed homing: %+v", a.Snapshot())
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			// The axis's frame: position = HomePosition at the edge. The re-approach finds
			// the edge within SlowSpeed·Poll = 0.1 step late, plus one for the floor.
			off := a.Position() - Steps(d.net) // position − drive count
			if want := o.Homing.HomePosition - edge; off < want-1 || off > want+1 {
				t.Fatalf("homed frame offset %d, want %d±1", off, want)
			}
			// Park: HomePosition − Down·BackOff = -700, inside the soft limits.
			if a.Position() != -700 || !a.Trusted() || a.Snapshot().Moving {
				t.Fatalf("after homing: %+v", a.Snapshot())
			}
			if on, _ := home.Active(); on {
				t.Fatal("parked on the switch")
			}
		})
	}
}

func TestHomingHitsLimitSwitch(t *testing.T) {
	o := testOptions()
	o.Homing = HomingOptions{BackOff: 200}
	r := newRig(t, o, &fakeSwitch{name: "home"})
	r.lower.on = true
	err := r.a.Home(context.Background())
	if !errors.Is(err, ErrFault) || !errors.Is(err, ErrLimitSwitch) {
		t.Fatalf("Home into an active lower limit = %v, want ErrFault/ErrLimitSwitch", err)
	}
	if r.d.running || r.a.Trusted() {
		t.Fatal("motor runs or position trusted after the fault")
	}
}

func TestSnapshotFromAnotherGoroutine(t *testing.T) {
	r := newReferencedRig(t, testOptions())
	var wg sync.WaitGroup
	stop := make(chan struct{})
	wg.Go(func() {
		for {
			select {
			case <-stop:
				return
			default:
				if s := r.a.Snapshot(); s.Position < -1000 || s.Position > 10000 {
					t.Errorf("snapshot out of range: %+v", s)
					return
				}
			}
		}
	})
	for i := range 20 {
		if err := r.a.MoveTo(context.Background(), Steps(i*400), 0); err != nil {
			t.Error(err)
			break
		}
	}
	close(stop)
	wg.Wait()
}

// hookClock runs a hook at a chosen Sleep, standing in for another goroutine acting between
// two polls.
type hookClock struct {
	*clock.Virtual
	sleeps, at int
	hook       func()
}

func (c *hookClock) Sleep(ctx context.Context, d time.Duration) error {
	c.sleeps++
	if c.sleeps == c.at {
		c.hook()
	}
	return c.Virtual.Sleep(ctx, d)
}

func TestHaltFromElsewhereFailsTheMove(t *testing.T) {
	vc := clock.NewVirtual(epoch)
	clk := &hookClock{Virtual: vc}
	d := newFakeDrive(vc)
	a, err := NewAxis(d, clk, Switches{}, testOptions())
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if err := a.Enable(ctx); err != nil {
		t.Fatal(err)
	}
	a.Reference(0)
	clk.at = clk.sleeps + 200 // 200 polls into the move
	clk.hook = func() {
		if err := a.Halt(); err != nil {
			t.Error(err)
		}
	}
	if err := a.MoveTo(ctx, 9000, 0); !errors.Is(err, ErrStopped) {
		t.Fatalf("MoveTo halted half way = %v, want ErrStopped", err)
	}
	if s := a.Snapshot(); s.Trusted || s.Enabled || s.Position != d.net || d.halts != 1 {
		t.Fatalf("after the halt: %+v", s)
	}
}

func TestHomeRefusedKeepsAReferencedPosition(t *testing.T) {
	r := newReferencedRig(t, testOptions())
	if err := r.a.Home(context.Background()); !errors.Is(err, ErrNoHomeSwitch) {
		t.Fatalf("Home without a switch = %v, want ErrNoHomeSwitch", err)
	}
	if !r.a.Trusted() {
		t.Fatal("a refused Home dropped the referenced position")
	}
}

func TestPositionAtFollowsTheDrive(t *testing.T) {
	r := newReferencedRig(t, testOptions())
	r.a.Reference(100)
	t0 := r.clk.Now()
	if err := r.a.Start(5100, 0); err != nil {
		t.Fatal(err)
	}
	r.clk.Advance(700 * time.Millisecond)
	if _, _, err := r.a.Poll(); err != nil {
		t.Fatal(err)
	}
	// The fake drive emits on the plan's schedule, so the plan it holds is the truth here.
	check := func(origin Steps, upTo time.Duration) {
		t.Helper()
		for x := -50 * time.Millisecond; x <= upTo; x += 5 * time.Millisecond {
			// The motor stands at the last pulse out until the next.
			want := origin + r.d.mv.Profile.StepsAt(x)
			if got := r.a.PositionAt(t0.Add(x)); got != float64(want) {
				t.Fatalf("PositionAt(start%+v) = %v, want %d", x, got, want)
			}
		}
	}
	check(100, 700*time.Millisecond)
	if err := r.a.StopMove(context.Background()); err != nil {
		t.Fatal(err)
	}
	check(100, r.d.mv.Profile.Duration()+time.Second)
	if got := r.a.PositionAt(r.clk.Now()); got != float64(r.a.Position()) {
		t.Fatalf("PositionAt(now) = %v after the move, Position %d", got, r.a.Position())
	}
	// Mid-cruise at 2000 steps/s, 10 ms apart is 20 steps (textbook s = v·t), give or take the
	// pulse that straddles an end.
	mid := t0.Add(500 * time.Millisecond)
	if d := r.a.PositionAt(mid.Add(10*time.Millisecond)) - r.a.PositionAt(mid); math.Abs(d-20) > 1 {
		t.Fatalf("10 ms of cruise moved %v steps, want 20", d)
	}
	r.a.Reference(r.a.Position() - 100) // the frame moves by -100; so do past instants
	check(0, r.d.mv.Profile.Duration())
	if lo, hi := r.a.SoftLimits(); lo != -1000 || hi != 10000 {
		t.Fatalf("SoftLimits = %d, %d", lo, hi)
	}
}

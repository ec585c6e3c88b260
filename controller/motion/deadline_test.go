package motion

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

// hangCase is one way the fake drive hangs.
type hangCase struct {
	name string
	mode hangMode
	deaf bool // it ignores Stop, release and Halt as well
}

func hangCases() []hangCase {
	return []hangCase{
		{"frozen mid-move", hangFrozen, false},
		{"frozen mid-move, deaf to stops", hangFrozen, true},
		{"never reports the end", hangNoEnd, false},
		{"never reports the end, deaf to stops", hangNoEnd, true},
	}
}

// hangFreezeAt is where a frozen drive stops emitting: inside every move the operations below
// start, the shortest being Approach's 60-step final leg.
const hangFreezeAt = 30

// homeEdge is the fake mechanics' home switch edge, in drive counts (as in TestHoming).
const homeEdge = 3000

// horizonClock is the virtual clock with a safety net: once virtual time has run past horizon,
// Sleep fails, so that an axis that would wait on a hung drive for ever fails the test instead
// of hanging it.
type horizonClock struct {
	*clock.Virtual
	horizon time.Time
}

var errHorizon = errors.New("test clock: past the horizon")

func (c *horizonClock) Sleep(ctx context.Context, d time.Duration) error {
	if c.Now().After(c.horizon) {
		return errHorizon
	}
	return c.Virtual.Sleep(ctx, d)
}

// testHorizon is far beyond the longest move in these tests (homing's 11.5 s seek) and its
// allowance, and short enough that a wait without end fails in well under a second.
const testHorizon = 2 * time.Minute

// rigHome says what home switch a hang rig has.
type rigHome int

const (
	noHome   rigHome = iota // referenced at 0, no home switch
	liveHome                // unreferenced; the home switch sits on the fake mechanics
	deadHome                // unreferenced; the home switch never trips
)

// newHangRig is an enabled axis on a fake drive and a horizon clock. With a home switch, the
// switch's edge is at drive count homeEdge and the drive starts 4000 counts above it.
func newHangRig(t *testing.T, o Options, home rigHome) *rig {
	t.Helper()
	vc := clock.NewVirtual(epoch)
	clk := &horizonClock{Virtual: vc, horizon: epoch.Add(testHorizon)}
	d := newFakeDrive(vc)
	r := &rig{clk: vc, d: d, lower: &fakeSwitch{name: "lower"}, upper: &fakeSwitch{name: "upper"}}
	sw := Switches{Lower: r.lower, Upper: r.upper}
	if home != noHome {
		d.net = homeEdge + 4000
		h := &edgeSwitch{d: d, at: homeEdge, hyst: 30, dead: home == deadHome}
		h.Active() // initial state from where the mechanics stand
		sw.Home = h
	}
	a, err := NewAxis(d, clk, sw, o)
	if err != nil {
		t.Fatal(err)
	}
	r.a = a
	if err := a.Enable(context.Background()); err != nil {
		t.Fatal(err)
	}
	if home == noHome {
		a.Reference(0)
	}
	return r
}

func hangOptions() Options {
	o := testOptions()
	o.Backlash, o.ApproachMargin = 50, 10
	o.Homing = HomingOptions{FastSpeed: 1000, SlowSpeed: 100, BackOff: 200, HomePosition: -900}
	return o
}

// TestHungDriveEveryOperationReturnsByItsDeadline hangs the drive in each way under each public
// operation that waits on the motor, and checks that the operation returns within one poll
// after the hung move's deadline with the fault latched, that the axis starts nothing more
// until Reset, and that Reset is refused while the drive still claims to run.
func TestHungDriveEveryOperationReturnsByItsDeadline(t *testing.T) {
	bg := context.Background()
	ops := []struct {
		name     string
		home     rigHome
		hangFrom int // the Start that hangs (1-based)
		// run performs the operation. If it brought the hung move to a ramped stop, it returns
		// the instant it did, from which the stopped plan and its deadline follow.
		run func(t *testing.T, r *rig) (stopAt time.Time, err error)
	}{
		{"Wait", noHome, 1, func(t *testing.T, r *rig) (time.Time, error) {
			if err := r.a.Start(5000, 0); err != nil {
				t.Fatal(err)
			}
			return time.Time{}, r.a.Wait(bg)
		}},
		{"MoveTo", noHome, 1, func(t *testing.T, r *rig) (time.Time, error) {
			return time.Time{}, r.a.MoveTo(bg, 5000, 0)
		}},
		{"MoveThrough", noHome, 1, func(t *testing.T, r *rig) (time.Time, error) {
			return time.Time{}, r.a.MoveThrough(bg, 5000, 1500)
		}},
		{"Approach hung in the run-up", noHome, 2, func(t *testing.T, r *rig) (time.Time, error) {
			if err := r.a.MoveTo(bg, 2000, 0); err != nil {
				t.Fatal(err)
			}
			// From above: a run-up to 1500 − (50+10) first, and that is the move that hangs.
			return time.Time{}, r.a.Approach(bg, 1500)
		}},
		{"Approach hung in the final leg", noHome, 3, func(t *testing.T, r *rig) (time.Time, error) {
			if err := r.a.MoveTo(bg, 2000, 0); err != nil {
				t.Fatal(err)
			}
			return time.Time{}, r.a.Approach(bg, 1500)
		}},
		{"StopMove", noHome, 1, func(t *testing.T, r *rig) (time.Time, error) {
			if err := r.a.Start(8000, 0); err != nil {
				t.Fatal(err)
			}
			r.clk.Advance(time.Second)
			return r.clk.Now(), r.a.StopMove(bg)
		}},
		{"Wait after a cancelled wait", noHome, 1, func(t *testing.T, r *rig) (time.Time, error) {
			if err := r.a.Start(8000, 0); err != nil {
				t.Fatal(err)
			}
			r.clk.Advance(time.Second)
			ctx, cancel := context.WithCancel(bg)
			cancel()
			stops, at := r.d.stops, r.clk.Now()
			// Cancellation still ends the wait at once, with a ramped stop begun.
			if err := r.a.Wait(ctx); !errors.Is(err, context.Canceled) {
				t.Fatalf("cancelled Wait = %v, want context.Canceled", err)
			}
			if took := r.clk.Since(at); took != 0 || r.d.stops != stops+1 {
				t.Fatalf("cancelled Wait took %v and asked for %d stops, want 0 s and one", took, r.d.stops-stops)
			}
			return at, r.a.Wait(bg)
		}},
		{"Disable", noHome, 1, func(t *testing.T, r *rig) (time.Time, error) {
			if err := r.a.Start(8000, 0); err != nil {
				t.Fatal(err)
			}
			r.clk.Advance(time.Second)
			at := r.clk.Now()
			err := r.a.Disable(bg)
			if s := r.a.Snapshot(); s.Enabled || r.d.enabled {
				t.Fatalf("Disable on a hung drive left it enabled: %+v", s)
			}
			return at, err
		}},
		{"Home hung seeking", deadHome, 1, func(t *testing.T, r *rig) (time.Time, error) {
			return time.Time{}, r.a.Home(bg)
		}},
		{"Home hung parking", liveHome, 5, func(t *testing.T, r *rig) (time.Time, error) {
			// Seek, back off to the release, back off further, re-approach, park: the fifth.
			err := r.a.Home(bg)
			if !strings.Contains(errString(err), "park") || r.d.mv.Dir != Up || r.d.plan.Steps > 250 {
				t.Fatalf("Home = %v, moves %d, last %+v; want the park leg to hang", err, r.d.starts, r.d.plan)
			}
			return time.Time{}, err
		}},
	}
	for _, op := range ops {
		for _, hc := range hangCases() {
			t.Run(op.name+"/"+hc.name, func(t *testing.T) {
				o := hangOptions()
				r := newHangRig(t, o, op.home)
				r.d.hang, r.d.hangFrom, r.d.freezeAt, r.d.deaf = hc.mode, op.hangFrom, hangFreezeAt, hc.deaf

				stopAt, err := op.run(t, r)

				if r.d.starts != op.hangFrom || !r.d.hung {
					t.Fatalf("%d moves started, last hung %v; the test meant move %d to hang", r.d.starts, r.d.hung, op.hangFrom)
				}
				if !errors.Is(err, ErrFault) || !errors.Is(err, ErrOverdue) || !errors.Is(err, ErrDrive) {
					t.Fatalf("error %v, want ErrFault, ErrOverdue and ErrDrive", err)
				}
				if msg := err.Error(); !strings.Contains(msg, "fake drive still running") || !strings.Contains(msg, "late") {
					t.Fatalf("error %q does not name the drive and how late the move is", msg)
				}
				if f := r.a.Fault(); !errors.Is(f, ErrOverdue) {
					t.Fatalf("Fault() = %v, want ErrOverdue latched", f)
				}
				// The deadline is the hung move's plan (stopped, if it was) plus the allowance;
				// the check runs at every poll, so the fault comes within one poll after it.
				plan := r.d.plan
				if !stopAt.IsZero() {
					plan = plan.StopAt(stopAt.Sub(r.d.t0))
				}
				deadline := r.d.t0.Add(r.a.TimeLimit(plan))
				if now := r.clk.Now(); !now.After(deadline) || now.After(deadline.Add(o.Poll)) {
					t.Fatalf("returned %v after the hung move began, want in (%v, %v]",
						now.Sub(r.d.t0), deadline.Sub(r.d.t0), deadline.Add(o.Poll).Sub(r.d.t0))
				}
				if r.d.stops == 0 || (!hc.deaf && (r.d.abrupt == 0 || r.d.running)) {
					t.Fatalf("the hung drive was not stopped: %d stops, %d abrupt, running %v", r.d.stops, r.d.abrupt, r.d.running)
				}
				if s := r.a.Snapshot(); s.Trusted || s.Moving || s.Fault == "" {
					t.Fatalf("after the fault: %+v", s)
				}

				// Nothing more starts until Reset, whatever is asked.
				starts, net := r.d.starts, r.d.net
				refused := []func() error{
					func() error { return r.a.MoveTo(bg, 100, 0) },
					func() error { return r.a.Start(100, 0) },
					func() error { return r.a.MoveThrough(bg, 100, 0) },
					func() error { return r.a.Approach(bg, 100) },
				}
				if op.home != noHome {
					refused = append(refused, func() error { return r.a.Home(bg) })
				}
				for i, move := range refused {
					if err := move(); !errors.Is(err, ErrFault) {
						t.Fatalf("move %d after the fault = %v, want ErrFault", i, err)
					}
				}
				r.clk.Advance(time.Second)
				if _, moving, err := r.a.Poll(); moving || !errors.Is(err, ErrOverdue) {
					t.Fatalf("Poll after the fault: moving %v, %v", moving, err)
				}
				if r.d.starts != starts || (!hc.deaf && r.d.net != net) {
					t.Fatalf("the latched axis moved: %d starts, %+d pulses", r.d.starts-starts, r.d.net-net)
				}

				if hc.deaf {
					// Halt does not wait on the drive either; it reports the drive still running.
					at := r.clk.Now()
					if err := r.a.Halt(); !errors.Is(err, ErrDrive) || r.clk.Since(at) != 0 {
						t.Fatalf("Halt on a deaf drive = %v after %v, want ErrDrive at once", err, r.clk.Since(at))
					}
					if s := r.a.Snapshot(); s.Enabled || s.Trusted || s.Moving {
						t.Fatalf("after Halt: %+v", s)
					}
					if err := r.a.Reset(); !errors.Is(err, ErrDrive) {
						t.Fatalf("Reset while the drive runs = %v, want ErrDrive", err)
					}
					if !errors.Is(r.a.Fault(), ErrOverdue) {
						t.Fatalf("a refused Reset changed the fault to %v", r.a.Fault())
					}
					if err := r.a.MoveTo(bg, 100, 0); !errors.Is(err, ErrFault) || r.d.starts != starts {
						t.Fatalf("move after a refused Reset = %v", err)
					}
					r.d.unhang()
				}
				r.d.hang = hangNone
				if err := r.a.Reset(); err != nil {
					t.Fatalf("Reset once the drive has stopped: %v", err)
				}
				if err := r.a.MoveTo(bg, 100, 0); !errors.Is(err, ErrUntrusted) && !errors.Is(err, ErrDisabled) {
					t.Fatalf("move after Reset = %v, want ErrUntrusted or ErrDisabled", err)
				}
				if err := r.a.Enable(bg); err != nil {
					t.Fatal(err)
				}
				r.a.Reference(0)
				if err := r.a.MoveTo(bg, 100, 0); err != nil {
					t.Fatalf("move after Reset, Enable and Reference: %v", err)
				}
			})
		}
	}
}

func errString(err error) string {
	if err == nil {
		return ""
	}
	return err.Error()
}

// TestHaltWithAHungDriveReturnsAtOnce: Halt never waits. A drive that obeys the halt ends the
// move as usual; one that does not is latched as a fault, and Reset waits for it.
func TestHaltWithAHungDriveReturnsAtOnce(t *testing.T) {
	for _, hc := range hangCases() {
		t.Run(hc.name, func(t *testing.T) {
			r := newHangRig(t, hangOptions(), noHome)
			r.d.hang, r.d.freezeAt, r.d.deaf = hc.mode, hangFreezeAt, hc.deaf
			if err := r.a.Start(5000, 0); err != nil {
				t.Fatal(err)
			}
			r.clk.Advance(300 * time.Millisecond)
			at := r.clk.Now()
			err := r.a.Halt()
			if r.clk.Since(at) != 0 || r.d.halts != 1 {
				t.Fatalf("Halt took %v, %d drive halts", r.clk.Since(at), r.d.halts)
			}
			if s := r.a.Snapshot(); s.Enabled || s.Moving || s.Trusted {
				t.Fatalf("after Halt: %+v", s)
			}
			if !hc.deaf {
				if err != nil || r.a.Fault() != nil || r.d.running {
					t.Fatalf("Halt of a drive that obeys it = %v, fault %v, running %v", err, r.a.Fault(), r.d.running)
				}
				return
			}
			// Not ErrFault: it is the halt's own failure, which a caller on its way out logs.
			if !errors.Is(err, ErrDrive) || errors.Is(err, ErrFault) || !strings.Contains(err.Error(), "still running after a halt") {
				t.Fatalf("Halt of a deaf drive = %v, want ErrDrive (not ErrFault) naming the hang", err)
			}
			if !errors.Is(r.a.Fault(), ErrDrive) {
				t.Fatalf("Fault() = %v, want the hang latched", r.a.Fault())
			}
			starts := r.d.starts
			if err := r.a.Enable(context.Background()); err != nil {
				t.Fatal(err)
			}
			if err := r.a.MoveTo(context.Background(), 0, 0); !errors.Is(err, ErrFault) || r.d.starts != starts {
				t.Fatalf("move after the halt = %v, %d starts", err, r.d.starts-starts)
			}
			if err := r.a.Reset(); !errors.Is(err, ErrDrive) {
				t.Fatalf("Reset while the drive runs = %v, want ErrDrive", err)
			}
			r.d.unhang()
			if err := r.a.Reset(); err != nil || r.a.Trusted() {
				t.Fatalf("Reset after the drive stopped = %v, trusted %v", err, r.a.Trusted())
			}
		})
	}
}

// TestDisableWithAHungDriveAndCancelledContext: a cancelled Disable stops the motor at once
// instead of waiting for the ramp; a drive that keeps running even when released is latched.
func TestDisableWithAHungDriveAndCancelledContext(t *testing.T) {
	for _, hc := range hangCases() {
		t.Run(hc.name, func(t *testing.T) {
			r := newHangRig(t, hangOptions(), noHome)
			r.d.hang, r.d.freezeAt, r.d.deaf = hc.mode, hangFreezeAt, hc.deaf
			if err := r.a.Start(5000, 0); err != nil {
				t.Fatal(err)
			}
			r.clk.Advance(300 * time.Millisecond)
			ctx, cancel := context.WithCancel(context.Background())
			cancel()
			at := r.clk.Now()
			err := r.a.Disable(ctx)
			if r.clk.Since(at) != 0 {
				t.Fatalf("a cancelled Disable took %v", r.clk.Since(at))
			}
			if s := r.a.Snapshot(); s.Enabled || s.Moving || s.Trusted || r.d.enabled {
				t.Fatalf("after Disable: %+v", s)
			}
			if !errors.Is(err, context.Canceled) {
				t.Fatalf("Disable = %v, want context.Canceled", err)
			}
			if hc.deaf != errors.Is(err, ErrFault) || hc.deaf != errors.Is(r.a.Fault(), ErrDrive) {
				t.Fatalf("deaf %v: Disable = %v, fault %v; want a latched ErrDrive exactly when the drive runs on", hc.deaf, err, r.a.Fault())
			}
			if hc.deaf {
				if err := r.a.Reset(); !errors.Is(err, ErrDrive) {
					t.Fatalf("Reset while the drive runs = %v, want ErrDrive", err)
				}
			}
		})
	}
}

// TestSlowDriveWithinItsAllowanceIsNoFault checks the allowance both ways: a drive running
// behind its plan by less than the allowance finishes normally, one further behind is a fault.
func TestSlowDriveWithinItsAllowanceIsNoFault(t *testing.T) {
	cases := []struct {
		name  string
		steps Steps
		slow  float64
		fault bool
	}{
		// 5000 steps at 2000 steps/s, 10000 steps/s²: 2.7 s (textbook trapezoid), allowed a
		// quarter more, 0.675 s: 20 % slow is 0.54 s late, 30 % is 0.81 s.
		{"long move, 20 % slow", 5000, 1.2, false},
		{"long move, 30 % slow", 5000, 1.3, true},
		// 40 steps: a triangle of 2·sqrt(40/10000) = 126 ms (textbook), where the 50 ms floor
		// of the allowance rules: 30 % slow is 38 ms late, 50 % is 63 ms.
		{"short move, 30 % slow", 40, 1.3, false},
		{"short move, 50 % slow", 40, 1.5, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := newHangRig(t, testOptions(), noHome)
			r.d.slow = c.slow
			p, _ := r.a.Plan(c.steps, 0)
			err := r.a.MoveTo(context.Background(), c.steps, 0)
			if c.fault {
				if !errors.Is(err, ErrOverdue) {
					t.Fatalf("MoveTo = %v, want ErrOverdue", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			late := time.Duration(float64(p.Duration())*c.slow) - p.Duration()
			if limit := r.a.TimeLimit(p); late >= limit-p.Duration() {
				t.Fatalf("case set up wrong: %v late, allowed %v", late, limit-p.Duration())
			}
		})
	}
}

func TestTimeLimitDefaultsAndOptions(t *testing.T) {
	clk := clock.NewVirtual(epoch)
	a, err := NewAxis(newFakeDrive(clk), clk, Switches{}, Options{Min: 0, Max: 100000})
	if err != nil {
		t.Fatal(err)
	}
	// The documented defaults: Poll 2 ms and Settle 50 ms give a floor of 4·2 + 50 = 58 ms.
	short, _ := a.Plan(100, 0) // 4000 steps/s, 20000 steps/s²: a 141 ms triangle (textbook)
	if got, want := a.TimeLimit(short)-short.Duration(), 58*time.Millisecond; got != want {
		t.Errorf("allowance of a %v move = %v, want the %v floor", short.Duration(), got, want)
	}
	long, _ := a.Plan(40000, 0) // 0.2 s of ramp each end and 9.8 s of cruise (textbook): 10.2 s
	if d := long.Duration(); math.Abs(d.Seconds()-10.2) > 1e-6 {
		t.Fatalf("a 40000-step move takes %v, want 10.2 s", d)
	}
	if got, want := a.TimeLimit(long)-long.Duration(), long.Duration()/4; absDur(got-want) > time.Nanosecond {
		t.Errorf("allowance of a %v move = %v, want a quarter, %v", long.Duration(), got, want)
	}

	a, err = NewAxis(newFakeDrive(clk), clk, Switches{}, Options{Min: 0, Max: 100000, OverrunFraction: 0.5, MinOverrun: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	if got := a.TimeLimit(short) - short.Duration(); got != time.Second {
		t.Errorf("allowance with MinOverrun 1 s = %v", got)
	}
	if got, want := a.TimeLimit(long)-long.Duration(), long.Duration()/2; absDur(got-want) > time.Nanosecond {
		t.Errorf("allowance with OverrunFraction 0.5 = %v, want %v", got, want)
	}

	for _, o := range []Options{
		{Min: 0, Max: 10, OverrunFraction: -0.1, MinOverrun: -time.Millisecond},
		{Min: 0, Max: 10, OverrunFraction: math.NaN(), MinOverrun: -1},
		{Min: 0, Max: 10, OverrunFraction: 11, MinOverrun: -1},
	} {
		_, err := NewAxis(newFakeDrive(clk), clk, Switches{}, o)
		for _, key := range []string{"OverrunFraction", "MinOverrun"} {
			if err == nil || !strings.Contains(err.Error(), key+" = ") {
				t.Errorf("NewAxis(%v, %v) = %v, want %s named", o.OverrunFraction, o.MinOverrun, err, key)
			}
		}
	}
}

package motion

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

// Outcomes of Axis operations, for errors.Is.
var (
	// ErrSoftLimit: the target lies outside the soft limits. Targets are never clamped.
	ErrSoftLimit = errors.New("target outside the soft limits")
	// ErrUntrusted: the position is not known (not homed or referenced, or lost since).
	ErrUntrusted = errors.New("position not trusted")
	// ErrFault: a fault is latched; every move is refused until Reset.
	ErrFault = errors.New("axis fault")
	// ErrBusy: a move is already running.
	ErrBusy = errors.New("a move is running")
	// ErrDisabled: the motor is released; call Enable first.
	ErrDisabled = errors.New("motor disabled")
	// ErrLimitSwitch: a limit switch was found active in the way of a move. It latches a fault.
	ErrLimitSwitch = errors.New("limit switch active")
	// ErrSwitchRead: a switch could not be read. It latches a fault.
	ErrSwitchRead = errors.New("switch read failed")
	// ErrDrive: the drive failed or misbehaved. It latches a fault.
	ErrDrive = errors.New("drive failure")
	// ErrOverdue: a move was still running past its deadline (its planned duration plus the
	// overrun allowance), so the drive is taken to hang. It wraps ErrDrive and latches a fault.
	ErrOverdue = fmt.Errorf("%w: move overdue", ErrDrive)
	// ErrStopped: a move ended short of its target (halted, or released, from elsewhere).
	ErrStopped = errors.New("move stopped short of its target")
	// ErrNoHomeSwitch: Home was called on an axis without a home switch.
	ErrNoHomeSwitch = errors.New("no home switch")
	// ErrSwitchStuck: the home switch stayed active while the axis backed away from it.
	ErrSwitchStuck = errors.New("home switch stuck active")
	// ErrSwitchNeverTriggered: the home switch did not trip within the allowed travel.
	ErrSwitchNeverTriggered = errors.New("home switch never triggered")
)

// Switches are the axis's optional switch inputs; each may be nil. The home switch must be an
// input of its own, inside the travel the limit switches guard.
type Switches struct {
	Home, Lower, Upper Switch
}

// Options configure an Axis. Zero values take the documented defaults, except Min and Max.
type Options struct {
	Min, Max        Steps         // soft limits, inclusive; Min < Max; no default
	MaxSpeed, Accel float64       // steps/s, steps/s²; default 4000 and 20000
	Settle          time.Duration // wait after every move before it counts as done; default 50 ms
	Poll            time.Duration // how often a running move is checked; default 2 ms
	Backlash        Steps         // gear play, used by Approach; 0 = none
	Approach        Direction     // final-approach direction for Approach; default Up
	ApproachMargin  Steps         // extra run-up beyond the backlash; default 32
	// SlipWhenReleased says the mechanics can turn with the motor released (a spring, gravity):
	// Disable then makes the position untrusted.
	SlipWhenReleased bool
	// Every move has a deadline: its planned duration d (after a ramped stop, the stopped plan's)
	// plus an overrun allowance of max(OverrunFraction·d, MinOverrun). A move the drive still
	// reports running past it is taken for a hung drive: the axis stops the drive at once and
	// latches ErrOverdue, so that no wait on the motor (and no tune carrier waiting on it) lasts
	// for ever. The check runs at every poll on the axis's clock, so an operation on a hung drive
	// returns at most one Poll after the deadline.
	//
	// OverrunFraction (default 0.25, at most 10) covers a pulse generator that falls behind its
	// plan in proportion to the move's length: a software step generator on a non-real-time
	// kernel stretches its delays under load, most at top speed; a quarter is well beyond what
	// a working one loses (from memory) yet keeps a hang on a long move from costing more than a
	// quarter of it again.
	OverrunFraction float64
	// MinOverrun (default max(4·Poll + Settle, 50 ms)) covers what does not scale with the move:
	// the axis sees the end only at its next poll, a loaded system oversleeps a poll or two, a
	// drive behind a bus or a thread takes a while to start, and a closed-loop drive may report
	// the move running until its rotor has settled, which takes about Settle. The 50 ms floor is
	// a few scheduling hiccups of a small Linux board (from memory).
	MinOverrun time.Duration
	Homing     HomingOptions
	Logger     *slog.Logger // default: discard
}

// HomingOptions configure Home. Every leg of homing is a bounded move, so the whole search
// travels at most MaxTravel + 6·BackOff plus a ramped stop's overshoot, and, each leg having
// its deadline like any move, takes a bounded time even on a hung drive.
type HomingOptions struct {
	Dir       Direction // toward the home switch; default Down
	FastSpeed float64   // seek speed, steps/s; default MaxSpeed/2
	// SlowSpeed is the re-approach speed, steps/s; default 200 or FastSpeed if lower. The switch
	// edge is found to within SlowSpeed·Poll steps.
	SlowSpeed float64
	BackOff   Steps // retreat from the switch; must exceed its hysteresis; default 400
	// MaxTravel bounds the seek for the switch; default (Max−Min) + 2·BackOff. Where the
	// mechanics have hard stops, it must not reach them from anywhere in the travel.
	MaxTravel Steps
	// HomePosition is the position assigned at the switch edge, found moving in Dir.
	HomePosition Steps
}

func (o *Options) resolve() error {
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	def(&o.MaxSpeed, 4000)
	def(&o.Accel, 20000)
	if o.Settle == 0 {
		o.Settle = 50 * time.Millisecond
	}
	if o.Poll == 0 {
		o.Poll = 2 * time.Millisecond
	}
	def(&o.OverrunFraction, 0.25)
	if o.MinOverrun == 0 {
		o.MinOverrun = max(4*o.Poll+o.Settle, 50*time.Millisecond)
	}
	if o.Approach == 0 {
		o.Approach = Up
	}
	if o.ApproachMargin == 0 {
		o.ApproachMargin = 32
	}
	h := &o.Homing
	if h.Dir == 0 {
		h.Dir = Down
	}
	def(&h.FastSpeed, o.MaxSpeed/2)
	def(&h.SlowSpeed, math.Min(200, h.FastSpeed))
	if h.BackOff == 0 {
		h.BackOff = 400
	}
	if h.MaxTravel == 0 && o.Max > o.Min {
		h.MaxTravel = o.Max - o.Min + 2*h.BackOff
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}

	var errs []error
	bad := func(key string, v any, want string) {
		errs = append(errs, fmt.Errorf("%s = %v: want %s", key, v, want))
	}
	speed := func(key string, v float64) {
		if !(v > 0) || math.IsInf(v, 0) {
			bad(key, v, "a positive finite number")
		}
	}
	if o.Min >= o.Max {
		bad("Max", o.Max, fmt.Sprintf("above Min (%d)", o.Min))
	}
	speed("MaxSpeed", o.MaxSpeed)
	speed("Accel", o.Accel)
	speed("Homing.FastSpeed", h.FastSpeed)
	speed("Homing.SlowSpeed", h.SlowSpeed)
	if h.FastSpeed > o.MaxSpeed {
		bad("Homing.FastSpeed", h.FastSpeed, fmt.Sprintf("at most MaxSpeed (%v)", o.MaxSpeed))
	}
	if h.SlowSpeed > h.FastSpeed {
		bad("Homing.SlowSpeed", h.SlowSpeed, fmt.Sprintf("at most Homing.FastSpeed (%v)", h.FastSpeed))
	}
	if o.Settle < 0 {
		bad("Settle", o.Settle, ">= 0")
	}
	if o.Poll < 0 {
		bad("Poll", o.Poll, "> 0")
	}
	// The cap keeps a deadline of the longest plan (maxPlanSeconds) inside time.Duration.
	if !(o.OverrunFraction > 0 && o.OverrunFraction <= maxOverrunFraction) {
		bad("OverrunFraction", o.OverrunFraction, fmt.Sprintf("in (0, %v]", float64(maxOverrunFraction)))
	}
	if o.MinOverrun < 0 {
		bad("MinOverrun", o.MinOverrun, "> 0")
	}
	if o.Backlash < 0 {
		bad("Backlash", o.Backlash, ">= 0")
	}
	if o.ApproachMargin < 0 {
		bad("ApproachMargin", o.ApproachMargin, ">= 0")
	}
	if o.Approach != Up && o.Approach != Down {
		bad("Approach", int(o.Approach), "+1 or -1")
	}
	if h.Dir != Up && h.Dir != Down {
		bad("Homing.Dir", int(h.Dir), "+1 or -1")
	}
	if h.BackOff < 0 {
		bad("Homing.BackOff", h.BackOff, "> 0")
	}
	if h.MaxTravel < 0 {
		bad("Homing.MaxTravel", h.MaxTravel, "> 0")
	}
	if len(errs) > 0 {
		return fmt.Errorf("axis options: %w", errors.Join(errs...))
	}
	return nil
}

// maxOverrunFraction bounds OverrunFraction: a drive ten times slower than its plan is broken,
// not slow.
const maxOverrunFraction = 10

// AxisState is a copy of an Axis's state, for status reports and metrics.
type AxisState struct {
	Position Steps // commanded position, as last polled
	Target   Steps // target of the running or last move
	Trusted  bool
	Distrust string // why the position is not trusted; empty when it is
	Moving   bool
	Enabled  bool
	Fault    string // the latched fault; empty if none
	Backlash Steps
	// Play is the direction in which the gear play is known to be taken up at Position: the
	// last motion ran at least Backlash that way. 0 when unknown.
	Play Direction
}

// Axis is the one place that knows the motor's position. It owns a Drive, the switches and a
// clock; it refuses moves beyond the soft limits or from an unknown position, and stops the motor
// and latches a fault on any failure.
//
// An Axis is driven by one goroutine (its owner). Snapshot, Position, Trusted and Fault may be
// called from any goroutine, and so may Halt.
type Axis struct {
	d   Drive
	clk clock.Clock
	sw  Switches
	o   Options
	log *slog.Logger

	mu       sync.Mutex
	pos      Steps
	trusted  bool
	why      string
	enabled  bool
	fault    error // latched; wraps ErrFault
	backlash Steps

	// The running (or last) move: it began at t0 from position from, on plan prof (with any
	// ramped stop applied), and counts as hung if still running after deadline.
	moving    bool
	t0        time.Time
	deadline  time.Time
	from      Steps
	prof      Profile
	dir       Direction
	planned   int64
	counted   int64     // pulses of the move already in pos
	countedAt time.Time // when counted was last brought up to date
	target    Steps
	limitsWas [2]bool // lower and upper limit switch state when the move started
	unsettled bool    // a move ended and its settling time has not been waited

	// clearAt is where a follow with a condition last found it false: the condition became true
	// somewhere between there and where it fired (a late poll can put that far apart).
	clearAt Steps

	// Gear play: the last direction the motor ran and how far since it last reversed.
	lastDir Direction
	run     Steps
}

// NewAxis returns an axis on drive d, with position untrusted and the motor assumed released:
// the caller must Enable it and then Home or Reference it before moving.
func NewAxis(d Drive, clk clock.Clock, sw Switches, opts Options) (*Axis, error) {
	if d == nil || clk == nil {
		return nil, errors.New("new axis: drive and clock are required")
	}
	if err := opts.resolve(); err != nil {
		return nil, fmt.Errorf("new axis: %w", err)
	}
	a := &Axis{d: d, clk: clk, sw: sw, o: opts, backlash: opts.Backlash, why: "not homed"}
	a.log = opts.Logger.With("component", "axis", "drive", d.String())
	return a, nil
}

// String names the axis by its drive.
func (a *Axis) String() string { return "axis on " + a.d.String() }

// Position returns the commanded motor position as of the last poll.
func (a *Axis) Position() Steps {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.pos
}

// Trusted reports whether the position is known.
func (a *Axis) Trusted() bool {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.trusted
}

// Fault returns the latched fault, nil if none. It wraps ErrFault and the cause.
func (a *Axis) Fault() error {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.fault
}

// Snapshot returns a copy of the axis's state.
func (a *Axis) Snapshot() AxisState {
	a.mu.Lock()
	defer a.mu.Unlock()
	s := AxisState{
		Position: a.pos, Target: a.target, Trusted: a.trusted, Moving: a.moving,
		Enabled: a.enabled, Backlash: a.backlash, Play: a.play(),
	}
	if !a.trusted {
		s.Distrust = a.why
	}
	if a.fault != nil {
		s.Fault = a.fault.Error()
	}
	return s
}

// Reference declares the current position to be p and trusts it. A running move is stopped at
// once first, and p is where it stopped. Reference does not clear a latched fault, and Reset
// distrusts the position again: after a fault, Reset first.
func (a *Axis) Reference(p Steps) {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.moving {
		a.d.Stop(false)
		a.endMove()
	}
	a.rebase(p)
	a.trusted, a.why = true, ""
	a.log.Info("position referenced", "pos", p)
}

// rebase moves the frame so that the current position reads p, the last move included, so
// that PositionAt stays consistent for readings taken during it.
func (a *Axis) rebase(p Steps) {
	a.from += p - a.pos
	a.pos = p
}

// SoftLimits returns the inclusive range moves may target.
func (a *Axis) SoftLimits() (lo, hi Steps) { return a.o.Min, a.o.Max }

// PositionAt is the position at instant t, for a reading taken while the motor moved: the
// pulses the latest move's plan (with any ramped stop) had emitted by t, its start position for
// earlier instants, and never beyond the pulses counted once the move has ended. A real drive
// follows the plan to within its step timing. It is a whole number of steps (float64 for the
// arithmetic of the callers that place readings).
func (a *Axis) PositionAt(t time.Time) float64 {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.t0.IsZero() {
		return float64(a.pos)
	}
	// The motor stands at the last pulse until the next: the position at t is the count of
	// pulses emitted by then, a whole number of steps. A drive that has fallen behind its plan
	// (a pulse generator on a loaded computer) has emitted no more by t than it had counted at a
	// later poll: so a poll after t bounds the plan from the drive's own count.
	x := float64(a.prof.StepsAt(t.Sub(a.t0)))
	if !a.moving || !a.countedAt.Before(t) {
		x = min(x, float64(a.counted))
	}
	return float64(a.from) + float64(a.dir)*x
}

// Plan is the profile a move of n steps at up to speed (0 = MaxSpeed) would follow: for
// estimating how long a move takes.
func (a *Axis) Plan(n Steps, speed float64) (Profile, error) {
	if speed <= 0 || speed > a.o.MaxSpeed {
		speed = a.o.MaxSpeed
	}
	return Plan(abs(n), speed, a.o.Accel)
}

// Settle is the settling time waited after a move.
func (a *Axis) Settle() time.Duration { return a.o.Settle }

// TimeLimit is how long a move on p may run before the axis takes its drive for hung: p's
// Duration plus the overrun allowance (see Options.OverrunFraction). A wait on the move returns
// within TimeLimit plus one Poll of its start, plus Settle if it ended in time: a caller that
// must bound something in time (a tune carrier) can budget with it.
func (a *Axis) TimeLimit(p Profile) time.Duration {
	d := p.Duration()
	return d + max(time.Duration(a.o.OverrunFraction*float64(d)), a.o.MinOverrun)
}

// MoveThrough moves to target at up to speed (0 = MaxSpeed) without waiting for the mechanics
// to settle: for a leg that another move follows at once.
func (a *Axis) MoveThrough(ctx context.Context, target Steps, speed float64) error {
	if err := a.Start(target, speed); err != nil {
		return err
	}
	if _, _, err := a.follow(ctx, nil, false); err != nil {
		return fmt.Errorf("axis: move through %d: %w", target, err)
	}
	if pos := a.Position(); pos != target {
		return fmt.Errorf("axis: move through %d: %w at %d", target, ErrStopped, pos)
	}
	return nil
}

// rampStop asks the drive for a controlled stop and applies the same stop to the plan.
func (a *Axis) rampStop() {
	if !a.moving {
		return
	}
	a.d.Stop(true)
	a.prof = a.prof.StopAt(a.clk.Now().Sub(a.t0))
	// The stopped plan ends no later than the original, so its deadline is no later either; a
	// drive that ignores the stop is caught by it.
	a.deadline = a.t0.Add(a.TimeLimit(a.prof))
}

// Distrust marks the position unknown, for example when the tuning found the resonance where the
// memory says it cannot be.
func (a *Axis) Distrust(reason string) {
	a.mu.Lock()
	defer a.mu.Unlock()
	a.distrust(reason)
}

func (a *Axis) distrust(reason string) {
	if a.trusted {
		a.log.Warn("position no longer trusted", "reason", reason)
	}
	a.trusted, a.why = false, reason
}

// UseBacklash installs a measured gear play for Approach; a negative value counts as none.
func (a *Axis) UseBacklash(b Steps) {
	a.mu.Lock()
	defer a.mu.Unlock()
	a.backlash = max(b, 0)
}

// play is the direction in which the gear play is taken up, 0 if unknown.
func (a *Axis) play() Direction {
	if a.lastDir != 0 && a.run >= a.backlash {
		return a.lastDir
	}
	return 0
}

func (a *Axis) forgetPlay() { a.lastDir, a.run = 0, 0 }

// trip stops the motor at once and latches cause as the fault; the first fault stays latched,
// being the likeliest root. The position is no longer trusted: an abrupt stop at speed can lose
// steps.
func (a *Axis) trip(cause error) error {
	a.d.Stop(false)
	if a.moving {
		a.endMove()
	}
	err := fmt.Errorf("%w: %w", ErrFault, cause)
	if a.fault == nil {
		a.fault = err
	}
	a.distrust("fault: " + cause.Error())
	a.forgetPlay()
	a.log.Error("fault: motor stopped", "err", cause, "pos", a.pos)
	return err
}

// account brings pos up to the drive's count of emitted pulses.
func (a *Axis) account(emitted int64) {
	n := emitted - a.counted
	if n <= 0 {
		return
	}
	a.counted = emitted
	a.pos += Steps(a.dir) * n
	if a.dir != a.lastDir {
		a.lastDir, a.run = a.dir, 0
	}
	a.run = min(a.run+n, math.MaxInt64/2)
}

// endMove takes the final count of a move that has stopped.
func (a *Axis) endMove() {
	emitted, _ := a.d.Progress()
	a.account(emitted)
	a.moving = false
	if a.counted > 0 {
		a.unsettled = true
	}
}

func (a *Axis) ready() error {
	switch {
	case a.fault != nil:
		return a.fault
	case a.moving:
		return ErrBusy
	case !a.enabled:
		return ErrDisabled
	}
	return nil
}

// checkTarget refuses a normal move to target.
func (a *Axis) checkTarget(target Steps) error {
	if err := a.ready(); err != nil {
		return err
	}
	if !a.trusted {
		return fmt.Errorf("%w (%s)", ErrUntrusted, a.why)
	}
	if target < a.o.Min || target > a.o.Max {
		return fmt.Errorf("%w: %d not in [%d, %d]", ErrSoftLimit, target, a.o.Min, a.o.Max)
	}
	return nil
}

// Start begins a move to target at up to speed steps/s (0 or above MaxSpeed: MaxSpeed) and
// returns at once; Poll or Wait follow it. A move to the current position does nothing.
func (a *Axis) Start(target Steps, speed float64) error {
	a.mu.Lock()
	defer a.mu.Unlock()
	if err := a.checkTarget(target); err != nil {
		return fmt.Errorf("axis: move to %d: %w", target, err)
	}
	if err := a.begin(target, speed); err != nil {
		return fmt.Errorf("axis: move to %d: %w", target, err)
	}
	return nil
}

// begin starts the drive toward target without the soft-limit and trust checks, which the caller
// has made (or, homing, deliberately skipped).
func (a *Axis) begin(target Steps, speed float64) error {
	if math.IsNaN(speed) || speed < 0 {
		return fmt.Errorf("speed %v: %w", speed, ErrBadProfile)
	}
	if speed == 0 || speed > a.o.MaxSpeed {
		speed = a.o.MaxSpeed
	}
	n := target - a.pos
	if n == 0 {
		return nil
	}
	dir := Up
	if n < 0 {
		dir, n = Down, -n
	}
	p, err := Plan(n, speed, a.o.Accel)
	if err != nil {
		return err
	}
	lower, upper, err := a.limits()
	if err != nil {
		return a.trip(err)
	}
	if (dir == Down && lower) || (dir == Up && upper) {
		return a.trip(fmt.Errorf("%w: %s limit switch, before moving %s", ErrLimitSwitch, limitName(dir), dir))
	}
	if err := a.d.Start(Move{Dir: dir, Profile: p}); err != nil {
		return a.trip(fmt.Errorf("%w: start %s: %w", ErrDrive, a.d, err))
	}
	a.moving, a.dir, a.planned, a.counted, a.target = true, dir, n, 0, target
	a.t0, a.from, a.prof = a.clk.Now(), a.pos, p
	a.deadline = a.t0.Add(a.TimeLimit(p))
	a.limitsWas = [2]bool{lower, upper}
	a.unsettled = false
	return nil
}

func limitName(d Direction) string {
	if d == Down {
		return "lower"
	}
	return "upper"
}

// limits reads the limit switches; an absent switch reads inactive.
func (a *Axis) limits() (lower, upper bool, err error) {
	read := func(s Switch) (bool, error) {
		if s == nil {
			return false, nil
		}
		on, err := s.Active()
		if err != nil {
			return false, fmt.Errorf("%w: %s: %w", ErrSwitchRead, s, err)
		}
		return on, nil
	}
	if lower, err = read(a.sw.Lower); err != nil {
		return false, false, err
	}
	upper, err = read(a.sw.Upper)
	return lower, upper, err
}

// Poll brings the bookkeeping up to date with the drive and checks the limit switches, tripping
// a fault if one is active in the direction of travel or became active during the move. It
// returns the latched fault, if any, as its error.
func (a *Axis) Poll() (pos Steps, moving bool, err error) {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.pos, a.moving, a.poll()
}

func (a *Axis) poll() error {
	if !a.moving {
		return a.fault
	}
	emitted, running := a.d.Progress()
	a.account(emitted)
	// One reading of the clock serves the poll: the count's instant and the deadline's check.
	now := a.clk.Now()
	a.countedAt = now
	if emitted > a.planned {
		return a.trip(fmt.Errorf("%w: %s emitted %d pulses of a %d-pulse move", ErrDrive, a.d, emitted, a.planned))
	}
	lower, upper, err := a.limits()
	if err != nil {
		return a.trip(err)
	}
	switch {
	case lower && (a.dir == Down || !a.limitsWas[0]):
		return a.trip(fmt.Errorf("%w: lower limit switch while moving %s at %d", ErrLimitSwitch, a.dir, a.pos))
	case upper && (a.dir == Up || !a.limitsWas[1]):
		return a.trip(fmt.Errorf("%w: upper limit switch while moving %s at %d", ErrLimitSwitch, a.dir, a.pos))
	}
	if !running {
		a.endMove()
		return nil
	}
	// A drive may finish a little late, but one still running past the deadline hangs: without
	// this check every wait on the motor would last as long as the hang.
	if now.After(a.deadline) {
		return a.trip(a.overdue(now, emitted))
	}
	return nil
}

// overdue describes a move still running at now, past its deadline.
func (a *Axis) overdue(now time.Time, emitted int64) error {
	ms := func(d time.Duration) time.Duration { return d.Round(time.Millisecond) }
	el, plan := now.Sub(a.t0), a.prof.Duration()
	return fmt.Errorf("%w: %s still running %v into the move to %d (%s%d steps) planned for %v: %v late, allowed %v; %d of %d pulses emitted",
		ErrOverdue, a.d, ms(el), a.target, a.dir, a.planned, ms(plan), ms(el-plan), ms(a.deadline.Sub(a.t0)-plan), emitted, a.prof.Total())
}

// Wait follows the running move until it ends, then waits the settling time. If ctx ends first,
// Wait begins a ramped stop (which never passes the move's target) and returns ctx's error; the
// axis may still be moving then, and a later Poll or Wait sees the stop through. A move still
// running past its deadline (see TimeLimit) latches ErrOverdue, so Wait returns at most one Poll
// after it whatever the drive does.
func (a *Axis) Wait(ctx context.Context) error {
	if _, _, err := a.follow(ctx, nil, true); err != nil {
		return fmt.Errorf("axis: wait: %w", err)
	}
	return nil
}

// follow polls the running move to its end and, with settle, waits the settling time. With
// until, it checks until at every poll and, the first time it reports true, begins a ramped
// stop and notes the position.
func (a *Axis) follow(ctx context.Context, until func() (bool, error), settle bool) (fired bool, at Steps, err error) {
	a.mu.Lock()
	a.clearAt = a.pos
	a.mu.Unlock()
	for {
		a.mu.Lock()
		err := a.poll()
		moving := a.moving
		if err == nil && until != nil && !fired {
			var hit bool
			if hit, err = until(); err != nil {
				err = a.trip(err)
			} else if hit {
				fired, at = true, a.pos
				a.rampStop()
			} else {
				a.clearAt = a.pos
			}
		}
		a.mu.Unlock()
		if err != nil {
			return fired, at, err
		}
		if !moving {
			break
		}
		if err := a.clk.Sleep(ctx, a.o.Poll); err != nil {
			a.mu.Lock()
			a.rampStop()
			a.mu.Unlock()
			return fired, at, err
		}
	}
	a.mu.Lock()
	unsettled := a.unsettled
	a.mu.Unlock()
	if unsettled && settle {
		if err := a.clk.Sleep(ctx, a.o.Settle); err != nil {
			return fired, at, fmt.Errorf("settle: %w", err)
		}
		a.mu.Lock()
		a.unsettled = false
		a.mu.Unlock()
	}
	return fired, at, nil
}

// MoveTo moves to target at up to speed (0 = MaxSpeed) and waits until it has settled there.
// It fails with ErrStopped if the move was cut short, for example by a Halt.
func (a *Axis) MoveTo(ctx context.Context, target Steps, speed float64) error {
	if err := a.Start(target, speed); err != nil {
		return err
	}
	if err := a.Wait(ctx); err != nil {
		return err
	}
	if pos := a.Position(); pos != target {
		return fmt.Errorf("axis: move to %d: %w at %d", target, ErrStopped, pos)
	}
	return nil
}

// Approach arrives at target from the configured approach direction with the gear play taken
// up. If the last motion into target would come from the other side, or would not run far
// enough to take up the play, it first goes to target − dir·(Backlash+ApproachMargin), clamped
// into the soft limits. Within Backlash+ApproachMargin of the soft limit behind the approach the
// run-up is shortened by the clamp, so keep tuning targets out of that strip.
func (a *Axis) Approach(ctx context.Context, target Steps) error {
	a.mu.Lock()
	if err := a.checkTarget(target); err != nil {
		a.mu.Unlock()
		return fmt.Errorf("axis: approach %d: %w", target, err)
	}
	pre, need := a.runUp(target)
	a.mu.Unlock()
	if need {
		// The run-up leg needs no settling: the final leg follows at once and settles.
		if err := a.MoveThrough(ctx, pre, 0); err != nil {
			return fmt.Errorf("axis: approach %d: run-up: %w", target, err)
		}
	}
	if err := a.MoveTo(ctx, target, 0); err != nil {
		return fmt.Errorf("axis: approach %d: %w", target, err)
	}
	return nil
}

// runUp says where Approach must start from, if it must go anywhere first.
func (a *Axis) runUp(target Steps) (pre Steps, need bool) {
	dir, b := a.o.Approach, a.backlash
	if b == 0 {
		return 0, false
	}
	delta := target - a.pos
	switch {
	case delta == 0:
		need = a.play() != dir
	case (delta > 0) == (dir == Up):
		carried := Steps(0)
		if a.lastDir == dir {
			carried = a.run
		}
		need = carried+abs(delta) < b
	default:
		need = true
	}
	pre = min(max(target-Steps(dir)*(b+a.o.ApproachMargin), a.o.Min), a.o.Max)
	return pre, need && pre != target
}

func abs(s Steps) Steps {
	if s < 0 {
		return -s
	}
	return s
}

// StopMove brings a running move to a controlled (ramped) stop and waits until it has settled.
// It returns the latched fault, if any. The stop has a deadline of its own, from the stopped
// plan: a drive that ignores the stop latches ErrOverdue by then.
func (a *Axis) StopMove(ctx context.Context) error {
	a.mu.Lock()
	a.rampStop()
	a.mu.Unlock()
	return a.Wait(ctx)
}

// Enable energises the motor and waits the settling time for the rotor to lock. It is allowed
// with a fault latched: a motor that holds still is the safe state.
func (a *Axis) Enable(ctx context.Context) error {
	a.mu.Lock()
	if a.enabled {
		a.mu.Unlock()
		return nil
	}
	if err := a.d.Enable(true); err != nil {
		err = a.trip(fmt.Errorf("%w: enable %s: %w", ErrDrive, a.d, err))
		a.mu.Unlock()
		return fmt.Errorf("axis: enable: %w", err)
	}
	a.enabled = true
	a.mu.Unlock()
	if err := a.clk.Sleep(ctx, a.o.Settle); err != nil {
		return fmt.Errorf("axis: enable: %w", err)
	}
	return nil
}

// Disable brings a running move to a ramped stop and releases the motor. A released motor no
// longer holds the gear play, so the play is forgotten; with SlipWhenReleased the position is
// no longer trusted either. If ctx ends during the stop, the motor is stopped at once instead.
// The stop is bounded by its deadline, so Disable returns even on a hung drive; a drive that
// still reports running once released latches a fault (ErrDrive) and leaves the position
// untrusted.
func (a *Axis) Disable(ctx context.Context) error {
	var waitErr error
	if a.Snapshot().Moving {
		waitErr = a.StopMove(ctx)
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.moving {
		a.d.Stop(false)
		a.endMove()
		a.distrust("stopped abruptly")
	}
	a.forgetPlay()
	err := a.d.Enable(false)
	a.enabled = false
	if a.o.SlipWhenReleased {
		a.distrust("motor released")
	}
	if err != nil {
		err = a.trip(fmt.Errorf("%w: release %s: %w", ErrDrive, a.d, err))
	} else if _, running := a.d.Progress(); running {
		err = a.trip(fmt.Errorf("%w: %s still running after its release", ErrDrive, a.d))
	}
	if err := errors.Join(waitErr, err); err != nil {
		return fmt.Errorf("axis: disable: %w", err)
	}
	return nil
}

// Reset clears a latched fault, an explicit operator action. The position stays untrusted. It
// stops the drive first and refuses (ErrDrive) while the drive still reports running, as a hung
// one may: the fault stays latched until the drive has been seen to.
func (a *Axis) Reset() error {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.fault == nil {
		return nil
	}
	a.d.Stop(false)
	if _, running := a.d.Progress(); running {
		return fmt.Errorf("axis: reset: %w: %s still running after a stop", ErrDrive, a.d)
	}
	a.log.Info("fault reset", "fault", a.fault)
	a.fault = nil
	a.distrust("fault reset")
	return nil
}

// Halt stops at once and releases the motor, leaving the axis inert (periph's conn.Resource
// convention). A move cut short at speed, or a motor that may slip, leaves the position
// untrusted. It never waits on the drive. A drive that still reports running after the halt is
// hung: Halt latches a fault, distrusts the position and returns an error wrapping ErrDrive;
// the error does not wrap ErrFault, being a failure of the halt itself, which a caller on its
// way out must log, not a refusal.
func (a *Axis) Halt() error {
	a.mu.Lock()
	defer a.mu.Unlock()
	err := a.d.Halt()
	if a.moving {
		a.endMove()
		a.distrust("halted during a move")
	}
	a.enabled = false
	a.forgetPlay()
	if a.o.SlipWhenReleased {
		a.distrust("motor released")
	}
	if _, running := a.d.Progress(); running {
		cause := fmt.Errorf("%w: %s still running after a halt", ErrDrive, a.d)
		a.trip(cause) // latched, so that nothing moves, and no Reset passes, while it runs
		err = errors.Join(err, cause)
	}
	if err != nil {
		return fmt.Errorf("axis: halt %s: %w", a.d, err)
	}
	return nil
}

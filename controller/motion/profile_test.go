package motion

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"
)

// pulseTime is the oracle for when pulse k of an unstopped plan fires: the textbook kinematics
// s = a·t²/2 during the ramps and s = v·t at cruise, solved for t.
func pulseTime(p Profile, k int64) float64 {
	a, v, n := p.Accel, p.MaxSpeed, float64(p.Steps)
	ramp := v * v / (2 * a) // distance to reach v: s = v²/2a
	if 2*ramp > n {
		ramp = n / 2
		v = math.Sqrt(n * a)
	}
	ta := v / a
	total := 2*ta + (n-2*ramp)/v
	x := float64(k)
	switch {
	case x <= ramp:
		return math.Sqrt(2 * x / a)
	case x <= n-ramp:
		return ta + (x-ramp)/v
	default:
		return total - math.Sqrt(2*(n-x)/a)
	}
}

func TestPlanRejectsBadValues(t *testing.T) {
	cases := []struct {
		name         string
		steps        int64
		speed, accel float64
	}{
		{"negative steps", -1, 1000, 1000},
		{"zero speed", 10, 0, 1000},
		{"negative speed", 10, -5, 1000},
		{"NaN speed", 10, math.NaN(), 1000},
		{"infinite speed", 10, math.Inf(1), 1000},
		{"zero accel", 10, 1000, 0},
		{"NaN accel", 10, 1000, math.NaN()},
		{"too long", math.MaxInt64, 1, 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if _, err := Plan(c.steps, c.speed, c.accel); !errors.Is(err, ErrBadProfile) {
				t.Fatalf("Plan(%d, %v, %v) = %v, want ErrBadProfile", c.steps, c.speed, c.accel, err)
			}
		})
	}
	if _, err := Plan(0, 1, 1); err != nil {
		t.Fatalf("Plan of an empty move: %v", err)
	}
}

func TestDurationAndPeakClosedForm(t *testing.T) {
	// Textbook kinematics: a trapezoid takes t = s/v + v/a; a triangle (s·a < v²) takes
	// t = 2·sqrt(s/a) and peaks at v = sqrt(s·a). Values worked by hand from those formulas.
	cases := []struct {
		name         string
		steps        int64
		speed, accel float64
		dur          time.Duration
		peak         float64
	}{
		{"trapezoid", 10000, 2000, 10000, 5200 * time.Millisecond, 2000},        // 10000/2000 + 2000/10000
		{"triangle", 100, 2000, 10000, 200 * time.Millisecond, 1000},            // 2·sqrt(100/10000); sqrt(1e6)
		{"just reaches cruise", 400, 2000, 10000, 400 * time.Millisecond, 2000}, // s·a = v²
		{"single pulse", 1, 100, 100, 200 * time.Millisecond, 10},               // 2·sqrt(1/100); sqrt(100)
		{"long slow", 160000, 4000, 20000, 40200 * time.Millisecond, 4000},      // 160000/4000 + 4000/20000
		{"empty", 0, 1000, 1000, 0, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p, err := Plan(c.steps, c.speed, c.accel)
			if err != nil {
				t.Fatal(err)
			}
			if got := p.Duration(); absDur(got-c.dur) > time.Microsecond {
				t.Errorf("Duration = %v, want %v", got, c.dur)
			}
			if got := p.PeakSpeed(); math.Abs(got-c.peak) > 1e-9*math.Max(1, c.peak) {
				t.Errorf("PeakSpeed = %v, want %v", got, c.peak)
			}
			if got := p.Total(); got != c.steps {
				t.Errorf("Total = %d, want %d", got, c.steps)
			}
			if got := p.SpeedAt(p.Duration() / 2); c.steps > 0 && math.Abs(got-c.peak) > 1e-6*c.peak {
				t.Errorf("SpeedAt(mid) = %v, want the peak %v", got, c.peak)
			}
		})
	}
}

func absDur(d time.Duration) time.Duration {
	if d < 0 {
		return -d
	}
	return d
}

func testProfiles(t *testing.T) []Profile {
	t.Helper()
	var ps []Profile
	for _, c := range []struct {
		steps        int64
		speed, accel float64
	}{
		{10000, 2000, 10000}, {100, 2000, 10000}, {1, 50, 30}, {2, 1000, 1000}, {3, 1e5, 1e3},
		{4001, 4000, 20000}, {77, 333.3, 777.7},
	} {
		p, err := Plan(c.steps, c.speed, c.accel)
		if err != nil {
			t.Fatal(err)
		}
		ps = append(ps, p)
	}
	return ps
}

func TestStepsAtMonotoneAndExact(t *testing.T) {
	for _, p := range testProfiles(t) {
		d := p.Duration()
		if got := p.StepsAt(0); got != 0 {
			t.Errorf("%+v: StepsAt(0) = %d", p, got)
		}
		if got := p.StepsAt(-time.Second); got != 0 {
			t.Errorf("%+v: StepsAt(-1s) = %d", p, got)
		}
		if got := p.StepsAt(d); got != p.Steps {
			t.Errorf("%+v: StepsAt(Duration) = %d, want %d", p, got, p.Steps)
		}
		if got := p.StepsAt(d + time.Hour); got != p.Steps {
			t.Errorf("%+v: StepsAt(after) = %d, want %d", p, got, p.Steps)
		}
		// The last pulse fires at the very end of the ideal trajectory: half the last
		// pulse's interval before it, sqrt(2/a)/2 (from s = a·t²/2), only a quarter step is left.
		half := time.Duration(math.Sqrt(2/p.Accel) / 2 * float64(time.Second))
		if got := p.StepsAt(d - half); got != p.Steps-1 {
			t.Errorf("%+v: StepsAt(Duration-%v) = %d, want %d", p, half, got, p.Steps-1)
		}
		prev := int64(0)
		step := max(d/20000, time.Nanosecond)
		for tt := time.Duration(0); tt <= d+step; tt += step {
			got := p.StepsAt(tt)
			if got < prev {
				t.Fatalf("%+v: StepsAt(%v) = %d after %d", p, tt, got, prev)
			}
			prev = got
		}
		// Each pulse fires at the instant the textbook kinematics say.
		for k := int64(1); k <= p.Steps; k += max(1, p.Steps/500) {
			at := time.Duration(pulseTime(p, k) * float64(time.Second))
			if before := p.StepsAt(at - time.Microsecond); before >= k {
				t.Errorf("%+v: pulse %d already out 1µs before %v (%d)", p, k, at, before)
			}
			if after := p.StepsAt(at + time.Microsecond); after < k {
				t.Errorf("%+v: pulse %d still missing 1µs after %v (%d)", p, k, at, after)
			}
		}
	}
}

func TestDelaysFollowTheRamp(t *testing.T) {
	for _, p := range testProfiles(t) {
		var sum float64
		var n int64
		for d := range p.Delays() {
			n++
			sum += d.Seconds()
			// The recursion matches the exact inter-pulse times to under 1% after its first
			// few steps (Austin 2005, with the 0.676 correction; the threshold from memory).
			if n > 3 && n < p.Steps-2 {
				exact := pulseTime(p, n) - pulseTime(p, n-1)
				if e := math.Abs(d.Seconds()-exact) / exact; e > 0.01 {
					t.Errorf("%+v: delay %d = %v, exact %.9fs: off by %.2f%%", p, n, d, exact, 100*e)
				}
			}
		}
		if n != p.Steps {
			t.Errorf("%+v: %d delays, want %d", p, n, p.Steps)
		}
		// The first-step correction shortens the two outermost delays by 0.324·sqrt(2/a)
		// each (Austin 2005: c0 scaled by 0.676); the rest of the sum tracks the exact duration
		// to a few percent (3% here, from memory), and long moves do so even uncorrected.
		want := p.Duration().Seconds()
		short := 2 * (1 - firstStepCorrection) * math.Sqrt(2/p.Accel)
		if p.Steps == 1 {
			short /= 2
		}
		if e := math.Abs(sum+short-want) / want; p.Steps >= 4 && e > 0.03 {
			t.Errorf("%+v: delays sum to %.6fs (+%.6f correction), Duration %.6fs: off by %.2f%%", p, sum, short, want, 100*e)
		}
		if p.Steps >= 4000 {
			if e := math.Abs(sum-want) / want; e > 0.03 {
				t.Errorf("%+v: delays sum to %.6fs, Duration %.6fs: off by %.2f%%", p, sum, want, 100*e)
			}
		}
	}
}

func TestStopAtRampsDownEarly(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	for _, p := range testProfiles(t) {
		d := p.Duration()
		for i := 0; i < 300; i++ {
			ts := time.Duration(r.Int64N(int64(d) + 1))
			q := p.StopAt(ts)
			v := p.SpeedAt(ts)
			at := p.StepsAt(ts)
			if q.Total() > p.Steps {
				t.Fatalf("%+v stopped at %v emits %d > %d", p, ts, q.Total(), p.Steps)
			}
			// Decelerating from v at a takes s = v²/2a (textbook); +1 for the floor.
			if more := q.Total() - at; float64(more) > v*v/(2*p.Accel)+1 {
				t.Fatalf("%+v stopped at %v at %v steps/s: %d more pulses, over v²/2a+1 = %.2f", p, ts, v, more, v*v/(2*p.Accel)+1)
			}
			if q.Duration() > d {
				t.Fatalf("%+v stopped at %v lasts %v, longer than the plan's %v", p, ts, q.Duration(), d)
			}
			if got := q.StepsAt(q.Duration()); got != q.Total() {
				t.Fatalf("%+v stopped at %v: StepsAt(Duration) = %d, Total %d", p, ts, got, q.Total())
			}
			prev := int64(0)
			for k := 0; k <= 400; k++ {
				tt := time.Duration(int64(q.Duration()) * int64(k) / 400)
				got := q.StepsAt(tt)
				if got < prev {
					t.Fatalf("%+v stopped at %v: StepsAt not monotone at %v", p, ts, tt)
				}
				prev = got
				if tt <= ts && got != p.StepsAt(tt) {
					t.Fatalf("%+v stopped at %v: before the stop StepsAt(%v) = %d, plan %d", p, ts, tt, got, p.StepsAt(tt))
				}
				if tt > ts && q.SpeedAt(tt) > v+1e-9 {
					t.Fatalf("%+v stopped at %v: speeds up after the stop", p, ts)
				}
			}
			n := int64(0)
			for range q.Delays() {
				n++
			}
			if n != q.Total() {
				t.Fatalf("%+v stopped at %v: %d delays, Total %d", p, ts, n, q.Total())
			}
			if later := q.StopAt(ts + time.Millisecond); later != q {
				t.Fatalf("a later stop changed an earlier one")
			}
		}
		if q := p.StopAt(0); q.Total() != 0 || q.Duration() != 0 {
			t.Errorf("%+v stopped at 0: %d pulses over %v, want none", p, q.Total(), q.Duration())
		}
		if q := p.StopAt(d); q.Total() != p.Steps || q.Duration() != d {
			t.Errorf("%+v stopped at its end: %d pulses over %v", p, q.Total(), q.Duration())
		}
	}
}

func TestSegments(t *testing.T) {
	// Trapezoid of 10000 steps at 2000 steps/s, 10000 steps/s²: each ramp covers v²/2a = 200
	// steps (textbook kinematics).
	p, err := Plan(10000, 2000, 10000)
	if err != nil {
		t.Fatal(err)
	}
	a, d, e := p.Segments()
	if math.Abs(a-200) > 1e-9 || math.Abs(d-9800) > 1e-9 || e != 10000 {
		t.Errorf("Segments = %v, %v, %v; want 200, 9800, 10000", a, d, e)
	}
	// Stopped at 1 s, in cruise at 2000 steps/s: it has covered 200 + 2000·0.8 = 1800 steps
	// and needs 200 more to stop.
	a, d, e = p.StopAt(time.Second).Segments()
	if math.Abs(a-200) > 1e-9 || math.Abs(d-1800) > 1e-9 || math.Abs(e-2000) > 1e-9 {
		t.Errorf("stopped Segments = %v, %v, %v; want 200, 1800, 2000", a, d, e)
	}
}

func BenchmarkStepsAt(b *testing.B) {
	p, err := Plan(160000, 4000, 20000)
	if err != nil {
		b.Fatal(err)
	}
	p = p.StopAt(30 * time.Second)
	d := p.Duration()
	var sink int64
	tt := time.Duration(0)
	for b.Loop() {
		tt += 97 * time.Microsecond
		if tt > d {
			tt = 0
		}
		sink += p.StepsAt(tt)
	}
	_ = sink
}

func BenchmarkDelays(b *testing.B) {
	p, err := Plan(100000, 4000, 20000)
	if err != nil {
		b.Fatal(err)
	}
	for b.Loop() {
		for range p.Delays() {
		}
	}
}

// TestPlannedProfileAnswersAsLiteral: a profile from Plan (and StopAt) keeps its trajectory
// computed; every query must answer exactly as the same profile written as a literal, which
// computes it afresh, and a planned profile whose fields are changed must follow the fields.
func TestPlannedProfileAnswersAsLiteral(t *testing.T) {
	for _, c := range []struct {
		steps        int64
		speed, accel float64
	}{{20000, 16000, 100000}, {40, 16000, 100000}, {1, 2000, 10000}, {0, 2000, 10000}, {777, 3000, 5000}} {
		planned, err := Plan(c.steps, c.speed, c.accel)
		if err != nil {
			t.Fatal(err)
		}
		literal := Profile{Steps: c.steps, MaxSpeed: c.speed, Accel: c.accel}
		stop := planned.Duration() / 3
		pairs := [][2]Profile{{planned, literal}, {planned.StopAt(stop), literal.StopAt(stop)},
			{planned.StopAt(stop).StopAt(stop / 2), literal.StopAt(stop / 2)}}
		for i, pr := range pairs {
			p, q := pr[0], pr[1]
			if p.traj == nil && c.steps > 0 {
				t.Errorf("%+v pair %d: the planned profile lost its trajectory", c, i)
			}
			if p.Duration() != q.Duration() || p.Total() != q.Total() || p.PeakSpeed() != q.PeakSpeed() {
				t.Errorf("%+v pair %d: duration %v/%v total %d/%d peak %v/%v", c, i, p.Duration(), q.Duration(),
					p.Total(), q.Total(), p.PeakSpeed(), q.PeakSpeed())
			}
			a1, d1, e1 := p.Segments()
			a2, d2, e2 := q.Segments()
			if a1 != a2 || d1 != d2 || e1 != e2 {
				t.Errorf("%+v pair %d: segments differ", c, i)
			}
			for at := -time.Millisecond; at <= p.Duration()+time.Millisecond; at += 997 * time.Microsecond {
				if p.StepsAt(at) != q.StepsAt(at) || p.SpeedAt(at) != q.SpeedAt(at) || p.positionAt(at) != q.positionAt(at) {
					t.Fatalf("%+v pair %d: at %v: steps %d/%d", c, i, at, p.StepsAt(at), q.StepsAt(at))
				}
			}
			var dp, dq []time.Duration
			for d := range p.Delays() {
				dp = append(dp, d)
			}
			for d := range q.Delays() {
				dq = append(dq, d)
			}
			if !slices.Equal(dp, dq) {
				t.Errorf("%+v pair %d: the pulse delays differ", c, i)
			}
		}
		changed := planned
		changed.Steps = c.steps + 100
		fresh := Profile{Steps: c.steps + 100, MaxSpeed: c.speed, Accel: c.accel}
		if changed.Duration() != fresh.Duration() || changed.Total() != fresh.Total() {
			t.Errorf("%+v: a planned profile whose steps changed answers for the old ones", c)
		}
	}
}

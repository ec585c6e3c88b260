package vclock

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"
)

// sleeps runs n sleeps of d on c and returns each one's lateness: how much further than d the
// clock moved.
func sleeps(t testing.TB, c *Clock, n int, d time.Duration) []time.Duration {
	t.Helper()
	ctx := context.Background()
	out := make([]time.Duration, n)
	for i := range out {
		t0 := c.Now()
		if err := c.Sleep(ctx, d); err != nil {
			t.Fatal(err)
		}
		out[i] = c.Now().Sub(t0) - d
	}
	return out
}

func jittered(t testing.TB, l Lateness) *Clock {
	t.Helper()
	c, err := NewJittered(Epoch, l)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

func TestZeroLatenessIsExact(t *testing.T) {
	c := jittered(t, Lateness{Seed: 7})
	if c.late != nil {
		t.Fatal("a zero Lateness installed a drawer: the exact clock's Sleep would not be today's")
	}
	rng := rand.New(rand.NewPCG(1, 2))
	ctx := context.Background()
	var want time.Duration
	for range 1000 {
		d := time.Duration(rng.Int64N(int64(50 * time.Millisecond)))
		want += d
		if err := c.Sleep(ctx, d); err != nil {
			t.Fatal(err)
		}
	}
	if got := c.Since(Epoch); got != want {
		t.Fatalf("zero lateness: slept %v in all, clock moved %v", want, got)
	}
}

func TestJitteredSameSeedSameRun(t *testing.T) {
	l := Lateness{Seed: 11, P: 0.3, Mean: time.Millisecond, Max: 8 * time.Millisecond, Shape: 2.5}
	a := sleeps(t, jittered(t, l), 500, 2*time.Millisecond)
	b := sleeps(t, jittered(t, l), 500, 2*time.Millisecond)
	l.Seed = 12
	c := sleeps(t, jittered(t, l), 500, 2*time.Millisecond)
	same, late := true, 0
	for i := range a {
		if a[i] != b[i] {
			t.Fatalf("seed 11 twice: sleep %d late by %v, then by %v", i, a[i], b[i])
		}
		same = same && a[i] == c[i]
		if a[i] > 0 {
			late++
		}
	}
	if same {
		t.Fatal("seeds 11 and 12 gave the same latenesses")
	}
	if late == 0 {
		t.Fatal("no wake-up was late at P = 0.3")
	}
}

func TestSleepOfNothingIsNeverLate(t *testing.T) {
	// time.Sleep returns at once for d <= 0 (Go's documented behaviour); so does this clock.
	c := jittered(t, Lateness{Seed: 1, P: 1, Mean: time.Millisecond})
	for _, d := range []time.Duration{0, -time.Second} {
		if err := c.Sleep(context.Background(), d); err != nil {
			t.Fatal(err)
		}
	}
	if !c.Now().Equal(Epoch) {
		t.Fatalf("sleeps of 0 and −1 s moved the clock to %v", c.Now())
	}
	c.Advance(time.Second)
	if got := c.Since(Epoch); got != time.Second {
		t.Fatalf("Advance(1s) on a late-waking clock moved it %v: Advance is never late", got)
	}
}

// TestLatenessDistribution checks the fraction of late wake-ups, their mean after the cap and
// the cap itself against the model, for both tails. Each statistic must lie within five standard
// errors of its expectation (common practice for a seeded statistical check: a fair seed fails
// it with probability under 10⁻⁶, so the fixed seed is not picked to pass).
func TestLatenessDistribution(t *testing.T) {
	const n = 200000
	for _, l := range []Lateness{
		{Seed: 3, P: 0.2, Mean: time.Millisecond, Max: 4 * time.Millisecond},
		{Seed: 4, P: 0.05, Mean: 500 * time.Microsecond, Max: 5 * time.Millisecond, Shape: 2},
		{Seed: 5, P: 1, Mean: 2 * time.Millisecond, Shape: 3}, // Max 0: ten times Mean
	} {
		got := sleeps(t, jittered(t, l), n, time.Millisecond)
		var late []float64
		var atCap int
		capd := l.Cap()
		for _, x := range got {
			if x < 0 || x > capd {
				t.Fatalf("%+v: a lateness of %v, outside [0, %v]", l, x, capd)
			}
			if x > 0 {
				late = append(late, float64(x))
			}
			if x == capd {
				atCap++
			}
		}
		// The fraction late is binomial(n, P): standard error sqrt(P(1−P)/n).
		frac := float64(len(late)) / n
		if se := math.Sqrt(l.P * (1 - l.P) / n); math.Abs(frac-l.P) > 5*se+1e-12 {
			t.Errorf("%+v: %.4f of wake-ups late, want %.4f ± %.4f", l, frac, l.P, 5*se)
		}
		// The mean of the late ones: standard error = sample deviation / sqrt(count).
		var sum, sq float64
		for _, x := range late {
			sum += x
		}
		mean := sum / float64(len(late))
		for _, x := range late {
			sq += (x - mean) * (x - mean)
		}
		se := math.Sqrt(sq/float64(len(late)-1)) / math.Sqrt(float64(len(late)))
		want := float64(l.CappedMean())
		if math.Abs(mean-want) > 5*se {
			t.Errorf("%+v: mean lateness %v, want %v ± %v", l, time.Duration(mean), time.Duration(want), time.Duration(5*se))
		}
		// The cap holds (checked above) and is reached as often as the tail says: the chance a
		// late wake-up draws beyond it is e^(−M/μ), or (1 + M/λ)^(−α) for the Lomax.
		mu, m := float64(l.Mean), float64(capd)
		tail := math.Exp(-m / mu)
		if l.Shape > 0 {
			tail = math.Pow(1+m/(mu*(l.Shape-1)), -l.Shape)
		}
		k := float64(len(late))
		if se := math.Sqrt(tail * (1 - tail) / k); math.Abs(float64(atCap)/k-tail) > 5*se+1/k {
			t.Errorf("%+v: %d of %d late wake-ups at the cap, want a fraction %.5f", l, atCap, len(late), tail)
		}
		t.Logf("%+v: %.4f late, mean %v (capped mean %v), %d at the cap %v", l, frac, time.Duration(mean), l.CappedMean(), atCap, capd)
	}
}

func TestNewJitteredReportsEveryBadField(t *testing.T) {
	_, err := NewJittered(Epoch, Lateness{P: 1.5, Mean: -1, Max: -1, Shape: 0.5})
	if err == nil {
		t.Fatal("bad lateness accepted")
	}
	for _, key := range []string{"P =", "Mean =", "Max =", "Shape ="} {
		if !strings.Contains(err.Error(), key) {
			t.Errorf("error %q does not name %s", err, key)
		}
	}
	if _, err := NewJittered(Epoch, Lateness{P: 0.1}); err == nil {
		t.Error("a late chance without a mean lateness accepted")
	}
}

// BenchmarkSleep is the exact clock's Sleep, the benchmark's hot path: it must cost what it did
// before late wake-ups existed (a lock and an add).
func BenchmarkSleep(b *testing.B) {
	c := New(Epoch)
	ctx := context.Background()
	for b.Loop() {
		_ = c.Sleep(ctx, time.Microsecond)
	}
}

func BenchmarkSleepJittered(b *testing.B) {
	c, err := NewJittered(Epoch, Lateness{Seed: 1, P: 0.2, Mean: time.Millisecond, Shape: 2.5})
	if err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	for b.Loop() {
		_ = c.Sleep(ctx, time.Microsecond)
	}
}

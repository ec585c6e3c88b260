package radio

import (
	"context"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

// epoch is an arbitrary start for the virtual clock.
var epoch = time.Date(2026, 1, 1, 12, 0, 0, 0, time.UTC)

// carrierAfter advances clk by d and reports the radio's carrier then.
func carrierAfter(clk *clock.Virtual, r *Radio, d time.Duration) bool {
	clk.Advance(d)
	on, _ := r.Carrier()
	return on
}

// With a clock the carrier reaches the antenna only once the key-up time has passed, and
// stays on for the unkey time after the unkey; the defaults are those Opts documents.
func TestCarrierFollowsKeyUpAndUnkeyTimes(t *testing.T) {
	clk := clock.NewVirtual(epoch)
	r := newRadio(t, Opts{Clock: clk, FreqA: 3700 * kHz})
	ctx := context.Background()
	if err := r.Key(ctx, 5*W); err != nil {
		t.Fatal(err)
	}
	if !r.Transmitting() {
		t.Fatal("keyed, but the radio does not say it transmits")
	}
	// Opts.KeyUp's default, 30 ms
	if carrierAfter(clk, r, 29*time.Millisecond) {
		t.Error("carrier on the antenna 29 ms after the key, before the 30 ms key-up")
	}
	if !carrierAfter(clk, r, time.Millisecond) {
		t.Fatal("no carrier once the key-up time has passed")
	}
	if on, p := r.Carrier(); !on || p != 5*W {
		t.Errorf("carrier %v at %s, want on at 5 W", on, p)
	}
	if err := r.Unkey(ctx); err != nil {
		t.Fatal(err)
	}
	if r.Transmitting() {
		t.Error("unkeyed, but the radio says it transmits")
	}
	// Opts.Unkey's default, 10 ms
	if !carrierAfter(clk, r, 9*time.Millisecond) {
		t.Error("the carrier left the antenna before the 10 ms unkey time")
	}
	if carrierAfter(clk, r, time.Millisecond) {
		t.Error("carrier still on once the unkey time has passed")
	}
}

// A key during the unkey time starts the transmit sequence again: the old carrier is gone and
// the new one needs its full key-up time. An unkey before the carrier came up leaves nothing
// on the antenna, and switching the radio off ends a carrier at once.
func TestKeyingEdges(t *testing.T) {
	clk := clock.NewVirtual(epoch)
	r := newRadio(t, Opts{Clock: clk, FreqA: 3700 * kHz, KeyUp: 20 * time.Millisecond, Unkey: 5 * time.Millisecond})
	ctx := context.Background()
	_ = r.Key(ctx, 5*W)
	if !carrierAfter(clk, r, 20*time.Millisecond) {
		t.Fatal("no carrier after the 20 ms key-up")
	}
	_ = r.Unkey(ctx)
	clk.Advance(2 * time.Millisecond)
	_ = r.Key(ctx, 5*W)
	if carrierAfter(clk, r, 0) {
		t.Error("a re-key during the unkey time shows a carrier before its own key-up")
	}
	if !carrierAfter(clk, r, 20*time.Millisecond) {
		t.Error("no carrier after the re-key's key-up")
	}

	_ = r.Unkey(ctx)
	clk.Advance(time.Second)
	_ = r.Key(ctx, 5*W)
	clk.Advance(10 * time.Millisecond)
	_ = r.Unkey(ctx) // before the carrier came up
	if carrierAfter(clk, r, 0) || carrierAfter(clk, r, 20*time.Millisecond) {
		t.Error("a carrier from a key unkeyed before its key-up")
	}

	_ = r.Key(ctx, 5*W)
	clk.Advance(time.Second)
	r.SwitchOff()
	if carrierAfter(clk, r, 0) {
		t.Error("a carrier on a radio switched off")
	}
}

// Negative delays mean none, and without a clock the carrier follows the keying at once.
func TestInstantKeying(t *testing.T) {
	ctx := context.Background()
	clk := clock.NewVirtual(epoch)
	for name, o := range map[string]Opts{
		"no delays": {Clock: clk, KeyUp: -1, Unkey: -1, FreqA: 3700 * kHz},
		"no clock":  {FreqA: 3700 * kHz},
	} {
		r := newRadio(t, o)
		_ = r.Key(ctx, 5*W)
		if !carrierAfter(clk, r, 0) {
			t.Errorf("%s: no carrier at the key", name)
		}
		_ = r.Unkey(ctx)
		if carrierAfter(clk, r, 0) {
			t.Errorf("%s: a carrier at the unkey", name)
		}
	}
}

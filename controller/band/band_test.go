package band

import (
	"testing"

	"periph.io/x/conn/v3/physic"
)

func TestLookup(t *testing.T) {
	// ITU Radio Regulations, article 5 (Region 2 allocations): 160 m is 1800–2000 kHz, 80 m is
	// 3500–4000 kHz, 40 m 7000–7300 kHz.
	for _, c := range []struct {
		f    physic.Frequency
		want string
	}{
		{1850 * physic.KiloHertz, "160m"},
		{3750 * physic.KiloHertz, "80m"},
		{4000 * physic.KiloHertz, "80m"},
		{7150 * physic.KiloHertz, "40m"},
	} {
		b, ok := Of(c.f)
		if !ok || b.Name != c.want {
			t.Errorf("Of(%v) = %v, %v; want %s", c.f, b.Name, ok, c.want)
		}
	}
	// WRC-15's worldwide secondary allocation at 60 m is 5351.5–5366.5 kHz (ITU Radio
	// Regulations, from memory): 5357 kHz is in it, 5400 kHz (a national channel) is not.
	if b, ok := Of(5357 * physic.KiloHertz); !ok || b.Name != "60m" {
		t.Errorf("Of(5357 kHz) = %v, %v; want 60m", b.Name, ok)
	}
	if _, ok := Of(5400 * physic.KiloHertz); ok {
		t.Error("5400 kHz is outside the worldwide 60 m allocation")
	}
	if _, ok := Of(2500 * physic.KiloHertz); ok {
		t.Error("2.5 MHz is in no amateur band")
	}
	b, err := Named("80 M")
	if err != nil || b.Centre() != 3750*physic.KiloHertz {
		t.Errorf("Named(80 M) = %v, %v", b, err)
	}
	if _, err := Named("11m"); err == nil {
		t.Error("11m is not an amateur band")
	}
	bands := All()
	bands[0].Low = 0
	if All()[0].Low == 0 {
		t.Error("editing the slice All returned changed the table")
	}
}

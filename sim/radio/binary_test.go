package radio

import (
	"bytes"
	"context"
	"fmt"
	"strings"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/drivers/cat/wire"
	"github.com/tankd/tankd/sim/vclock"
)

// hx turns "fe fe 94 e0 03 fd" into bytes: frames written the way the dialect's references
// print them.
func hx(t *testing.T, s string) []byte {
	t.Helper()
	var b []byte
	for _, f := range strings.Fields(s) {
		var v byte
		if _, err := fmt.Sscanf(f, "%02x", &v); err != nil {
			t.Fatalf("bad hex %q", f)
		}
		b = append(b, v)
	}
	return b
}

type binaryClient struct {
	*client
	echo bool
}

// cmd sends a frame and, on a bus with echo, reads its echo back.
func (c *binaryClient) cmd(frame string) {
	c.t.Helper()
	b := hx(c.t, frame)
	c.send(b)
	if c.echo {
		if got := c.next(); !bytes.Equal(got, b) {
			c.t.Fatalf("echo % x, want % x", got, b)
		}
	}
}

func (c *binaryClient) expect(frame string) {
	c.t.Helper()
	want := hx(c.t, frame)
	if got := c.next(); !bytes.Equal(got, want) {
		c.t.Fatalf("got % x, want % x", got, want)
	}
}

func startBinary(t *testing.T, r *Radio, o BinaryOpts) *binaryClient {
	t.Helper()
	radioEnd, ctlEnd := Pipe(0)
	serving(t, func(ctx context.Context) error { return r.ServeBinary(ctx, radioEnd, o) })
	return &binaryClient{client: newClient(t, ctlEnd, wire.SplitBinary), echo: !o.NoEcho}
}

// Frames below are written out by hand from memory of the binary dialect's references:
// FE FE <to> <from> <command> [<sub>] [data] FD, controller 0xE0, our radio 0x94, frequencies
// as five packed-BCD bytes low pair first, OK FB, NG FA.
const (
	ok = "fe fe e0 94 fb fd"
	ng = "fe fe e0 94 fa fd"
)

func TestBinaryFrequency(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{})
	c.cmd("fe fe 94 e0 03 fd")
	c.expect("fe fe e0 94 03 00 00 20 14 00 fd") // 14.200 000 MHz
	c.cmd("fe fe 94 e0 05 00 40 07 14 00 fd")    // set 14.074 000 MHz
	c.expect(ok)
	if r.Frequency() != 14074*kHz {
		t.Fatalf("frequency %s", r.Frequency())
	}
	c.cmd("fe fe 94 e0 03 fd")
	c.expect("fe fe e0 94 03 00 40 07 14 00 fd")
	c.cmd("fe fe 94 e0 05 00 00 50 09 00 fd") // 9.500 MHz, a broadcast band (from memory)
	c.expect(ng)
	if r.Frequency() != 14074*kHz {
		t.Fatalf("a refused frequency moved the radio to %s", r.Frequency())
	}
}

func TestBinaryMode(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{})
	c.cmd("fe fe 94 e0 04 fd")
	c.expect("fe fe e0 94 04 01 01 fd") // USB, filter 1
	c.cmd("fe fe 94 e0 06 03 fd")       // CW
	c.expect(ok)
	c.cmd("fe fe 94 e0 06 05 02 fd") // FM, filter 2 (ignored: the radio has none)
	c.expect(ok)
	if r.Mode() != FM {
		t.Fatalf("mode %s", r.Mode())
	}
	c.cmd("fe fe 94 e0 04 fd")
	c.expect("fe fe e0 94 04 05 01 fd")
	c.cmd("fe fe 94 e0 06 06 fd") // wide FM: not a mode this radio has
	c.expect(ng)
}

func TestBinaryPTT(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{})
	c.cmd("fe fe 94 e0 1c 00 01 fd")
	c.expect(ok)
	if !r.Transmitting() {
		t.Fatal("PTT on did not transmit")
	}
	if on, p := r.Carrier(); on {
		t.Fatalf("PTT in USB with no audio gives a carrier of %s", p)
	}
	c.cmd("fe fe 94 e0 1c 00 fd")
	c.expect("fe fe e0 94 1c 00 01 fd")
	c.cmd("fe fe 94 e0 1c 00 00 fd")
	c.expect(ok)
	c.cmd("fe fe 94 e0 1c 00 fd")
	c.expect("fe fe e0 94 1c 00 00 fd")
	if r.Transmitting() {
		t.Fatal("PTT off left the radio transmitting")
	}
}

func TestBinaryPower(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{})
	c.cmd("fe fe 94 e0 14 0a fd")
	c.expect("fe fe e0 94 14 0a 02 55 fd") // full power is level 255
	c.cmd("fe fe 94 e0 14 0a 01 28 fd")    // level 128
	c.expect(ok)
	// Level 128 of 255 is 100 W × 128/255 = 50.196 W (the linear scale ServeBinary documents).
	if want := physic.Power(50196078431); r.Power() != want {
		t.Fatalf("power %d nW, want %d nW", r.Power(), want)
	}
	c.cmd("fe fe 94 e0 14 0a fd")
	c.expect("fe fe e0 94 14 0a 01 28 fd")
	if err := r.SetPower(25 * W); err != nil {
		t.Fatal(err)
	}
	c.cmd("fe fe 94 e0 14 0a fd")
	c.expect("fe fe e0 94 14 0a 00 64 fd") // 25 W is 63.75, rounded to 64, of 255
}

func TestBinaryIDAndVFO(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{})
	c.cmd("fe fe 94 e0 19 00 fd")
	c.expect("fe fe e0 94 19 00 94 fd")
	c.cmd("fe fe 94 e0 07 01 fd") // VFO B
	c.expect(ok)
	c.cmd("fe fe 94 e0 03 fd")
	c.expect("fe fe e0 94 03 00 00 10 07 00 fd") // VFO B's 7.100 MHz
	if r.VFO() != VFOB {
		t.Fatal("VFO B not selected")
	}
}

func TestBinaryAddressing(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{Addr: 0x70})
	c.cmd("fe fe 94 e0 03 fd") // addressed to another radio on the bus: only the echo
	c.cmd("fe fe 70 70 03 fd") // "from" our own address: our own frame, ignored
	c.cmd("fe fe 70 e1 19 00 fd")
	c.expect("fe fe e1 70 19 00 70 fd") // answered to whoever asked
}

func TestBinaryErrors(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{})
	for _, frame := range []string{
		"fe fe 94 e0 99 fd",                // unknown command
		"fe fe 94 e0 05 0a 40 07 14 00 fd", // not BCD
		"fe fe 94 e0 05 00 40 07 fd",       // short frequency
		"fe fe 94 e0 14 0a 02 56 fd",       // level above 255
		"fe fe 94 e0 03 00 40 07 14 00 fd", // an answer sent to the radio
		"fe fe 94 e0 1c 00 02 fd",          // transmit state 2
		"fe fe 94 e0 14 01 fd",             // unknown sub-command
	} {
		c.cmd(frame)
		c.expect(ng)
	}
}

func TestBinaryResynchronises(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{NoEcho: true})
	c.send(hx(t, "00 13 fe fe 94 e0 05 00 fc fc fc fd 42 fe fe 94 e0 05 00 40"))
	c.send(hx(t, "fe fe 94 e0 19 00 fd"))
	c.expect("fe fe e0 94 19 00 94 fd") // nothing for the noise, an answer for the command
}

func TestBinaryNoEcho(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{NoEcho: true})
	c.cmd("fe fe 94 e0 19 00 fd")
	c.expect("fe fe e0 94 19 00 94 fd") // the reply comes first: no echo
}

func TestBinaryTransceive(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{})
	c.cmd("fe fe 94 e0 19 00 fd") // the server is subscribed once it answers
	c.expect("fe fe e0 94 19 00 94 fd")
	if err := r.SetFrequency(21074 * kHz); err != nil {
		t.Fatal(err)
	}
	c.expect("fe fe 00 94 00 00 40 07 21 00 fd") // to everyone: 21.074 MHz
	if err := r.SetMode(LSB); err != nil {
		t.Fatal(err)
	}
	c.expect("fe fe 00 94 01 00 01 fd") // LSB, filter 1
	if err := r.SetVFOFrequency(VFOB, 7074*kHz); err != nil {
		t.Fatal(err) // not the VFO in use: nothing to broadcast
	}
	if err := r.SelectVFO(VFOB); err != nil {
		t.Fatal(err)
	}
	c.expect("fe fe 00 94 00 00 40 07 07 00 fd") // now it is
	// The session's own change is acknowledged, not broadcast back.
	c.cmd("fe fe 94 e0 05 00 00 10 07 00 fd")
	c.expect(ok)
	c.cmd("fe fe 94 e0 19 00 fd")
	c.expect("fe fe e0 94 19 00 94 fd")
}

func TestBinaryNoTransceive(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startBinary(t, r, BinaryOpts{NoTransceive: true})
	c.cmd("fe fe 94 e0 19 00 fd")
	c.expect("fe fe e0 94 19 00 94 fd")
	if err := r.SetFrequency(21074 * kHz); err != nil {
		t.Fatal(err)
	}
	c.cmd("fe fe 94 e0 03 fd") // whatever the order, the next frame is the answer
	c.expect("fe fe e0 94 03 00 40 07 21 00 fd")
}

func TestBinaryRadioOffEchoesOnly(t *testing.T) {
	r := newRadio(t, Opts{Off: true})
	in := string(hx(t, "fe fe 94 e0 03 fd fe fe 94 e0 1c 00 01 fd"))
	s := newScript(in)
	if err := r.ServeBinary(context.Background(), s, BinaryOpts{}); err != nil {
		t.Fatal(err)
	}
	if s.out.String() != in {
		t.Fatalf("a radio switched off sent % x, want only the echo % x", s.out.String(), in)
	}
	if r.State().TX {
		t.Fatal("a radio switched off took a PTT command")
	}
}

func TestBinaryBadOptions(t *testing.T) {
	r := newRadio(t, Opts{})
	for _, addr := range []byte{wire.AddrController, 0xfc, 0xfd, 0xfe, 0xff} {
		err := r.ServeBinary(context.Background(), newScript(""), BinaryOpts{Addr: addr})
		if err == nil || !strings.Contains(err.Error(), "Addr") {
			t.Errorf("address %#02x: %v", addr, err)
		}
	}
	if err := r.ServeBinary(context.Background(), newScript(""), BinaryOpts{Faults: Faults{Delay: 1.5}}); err == nil {
		t.Error("a delay rate of 1.5 accepted")
	}
}

func TestBinaryFaults(t *testing.T) {
	// The same knobs on the binary dialect, from a script: with echo off, every byte out is a
	// reply. 400 ID queries, drop chance 0.25, delay chance 0.5.
	const n = 400
	run := func(seed uint64) (string, int64) {
		r := newRadio(t, Opts{})
		clk := vclock.New(vclock.Epoch)
		s := newScript(strings.Repeat(string(hx(t, "fe fe 94 e0 19 00 fd")), n))
		err := r.ServeBinary(context.Background(), s, BinaryOpts{
			NoEcho: true, Clock: clk,
			Faults: Faults{Seed: seed, Drop: 0.25, Delay: 0.5, DelayBy: 1_000_000_000},
		})
		if err != nil {
			t.Fatal(err)
		}
		return s.out.String(), int64(clk.Since(vclock.Epoch))
	}
	out, elapsed := run(5)
	reply := string(hx(t, "fe fe e0 94 19 00 94 fd"))
	if strings.ReplaceAll(out, reply, "") != "" {
		t.Fatalf("faults other than drop and delay struck: % x", out)
	}
	within5Sigma(t, "binary replies kept", strings.Count(out, reply), n, 0.75)
	within5Sigma(t, "binary replies delayed", int(elapsed/1_000_000_000), n, 0.5)
	if again, el := run(5); again != out || el != elapsed {
		t.Error("the same seed gave different faults")
	}
}

func TestModeCodes(t *testing.T) {
	// The dialects' codes, from memory of their published references.
	cases := []struct {
		mode   Mode
		ascii  wire.ASCIIMode
		binary wire.BinaryMode
	}{
		{LSB, 1, 0x00}, {USB, 2, 0x01}, {CW, 3, 0x03}, {FM, 4, 0x05},
		{AM, 5, 0x02}, {Data, 6, 0x04}, {CWReverse, 7, 0x07}, {DataReverse, 9, 0x08},
	}
	for _, tc := range cases {
		if got := asciiMode(tc.mode); got != tc.ascii {
			t.Errorf("%s: ASCII code %d, want %d", tc.mode, got, tc.ascii)
		}
		if got, ok := modeFromASCII(tc.ascii); !ok || got != tc.mode {
			t.Errorf("ASCII code %d: mode %s, want %s", tc.ascii, got, tc.mode)
		}
		if got := binaryMode(tc.mode); got != tc.binary {
			t.Errorf("%s: binary code %#02x, want %#02x", tc.mode, got, tc.binary)
		}
		if got, ok := modeFromBinary(tc.binary); !ok || got != tc.mode {
			t.Errorf("binary code %#02x: mode %s, want %s", tc.binary, got, tc.mode)
		}
	}
	if _, ok := modeFromASCII(8); ok {
		t.Error("ASCII code 8 maps to a mode")
	}
	if _, ok := modeFromBinary(wire.BinWFM); ok {
		t.Error("wide FM maps to a mode")
	}
}

func BenchmarkBinaryRoundTrip(b *testing.B) {
	r, err := New(Opts{})
	if err != nil {
		b.Fatal(err)
	}
	radioEnd, ctl := Pipe(0)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- r.ServeBinary(ctx, radioEnd, BinaryOpts{NoEcho: true}) }()
	defer func() { cancel(); <-done }()
	query := []byte{0xfe, 0xfe, 0x94, 0xe0, 0x03, 0xfd}
	buf := make([]byte, 64)
	for b.Loop() {
		if _, err := ctl.Write(query); err != nil {
			b.Fatal(err)
		}
		for n := 0; n < 11; { // the 11-byte frequency answer
			m, err := ctl.Read(buf[n:])
			if err != nil {
				b.Fatal(err)
			}
			n += m
		}
	}
}

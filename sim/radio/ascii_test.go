package radio

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/drivers/cat/wire"
	"github.com/tankd/tankd/sim/vclock"
)

type asciiClient struct {
	*client
	o wire.ASCIIOpts
}

func (c *asciiClient) cmd(s string) { c.t.Helper(); c.send([]byte(s)) }

// expect reads the next frame and requires it to be want.
func (c *asciiClient) expect(want string) {
	c.t.Helper()
	if got := string(c.next()); got != want {
		c.t.Fatalf("got %q, want %q", got, want)
	}
}

// status reads the next frame and decodes it as a status record.
func (c *asciiClient) status() wire.Status {
	c.t.Helper()
	f := c.next()
	m, err := wire.ParseASCII(f, c.o)
	if err != nil || m.Cmd != wire.CmdStatus || m.Query {
		c.t.Fatalf("want a status record, got %q (%v)", f, err)
	}
	return m.Status
}

// startASCII serves r over an in-memory link and returns the controller's side.
func startASCII(t *testing.T, r *Radio, o ASCIIOpts) *asciiClient {
	t.Helper()
	radioEnd, ctlEnd := Pipe(0)
	serving(t, func(ctx context.Context) error { return r.ServeASCII(ctx, radioEnd, o) })
	return &asciiClient{client: newClient(t, ctlEnd, wire.SplitASCII), o: o.Wire}
}

func TestASCIIFrequency(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{})
	// Frequencies in hertz, zero-padded to 11 digits (from memory of the dialect's published
	// references; the same layout the codec's worked examples use).
	c.cmd("FA;")
	c.expect("FA00014200000;")
	c.cmd("FA00014074000;") // a set command is not answered: the next frame is the query's
	c.cmd("FA;")
	c.expect("FA00014074000;")
	c.cmd("FB00003573000;FB;")
	c.expect("FB00003573000;")
	if r.VFOFrequency(VFOA) != 14074*kHz || r.VFOFrequency(VFOB) != 3573*kHz {
		t.Fatalf("radio state %+v", r.State())
	}
	// 9.5 MHz is a broadcast band, outside the default amateur bands (from memory of the ITU
	// allocations): refused, and the VFO stays.
	c.cmd("FA00009500000;")
	c.expect("?;")
	c.cmd("FA;")
	c.expect("FA00014074000;")
}

func TestASCIINineDigitFrequency(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{Wire: wire.ASCIIOpts{FreqDigits: 9}})
	c.cmd("FA021074000;FA;") // 21.074 MHz in 9 digits (from memory of the 9-digit radios' references)
	c.expect("FA021074000;")
	c.cmd("FA00021074000;") // the 11-digit form is malformed on a 9-digit radio
	c.expect("?;")
	if r.Frequency() != 21074*kHz {
		t.Fatalf("frequency %s", r.Frequency())
	}
}

func TestASCIIMode(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{})
	// Mode codes from memory of the dialect's references: 2 USB, 3 CW, 4 FM, 6 FSK, 7 CW-R.
	c.cmd("MD;")
	c.expect("MD2;")
	for _, tc := range []struct {
		code string
		mode Mode
	}{{"3", CW}, {"4", FM}, {"6", Data}, {"7", CWReverse}, {"1", LSB}} {
		c.cmd("MD" + tc.code + ";MD;")
		c.expect("MD" + tc.code + ";")
		if r.Mode() != tc.mode {
			t.Fatalf("MD%s; gave mode %s, want %s", tc.code, r.Mode(), tc.mode)
		}
	}
	c.cmd("MD8;") // unused code
	c.expect("?;")
	if r.Mode() != LSB {
		t.Fatalf("a refused mode changed the radio to %s", r.Mode())
	}
}

func TestASCIITransmit(t *testing.T) {
	r := newRadio(t, Opts{Power: 40 * W})
	c := startASCII(t, r, ASCIIOpts{})
	c.cmd("TX;IF;")
	if st := c.status(); !st.TX || st.Freq != 14200*kHz || st.Mode != wire.ASCIIUSB || st.VFO != wire.VFOA {
		t.Fatalf("status while transmitting: %+v", st)
	}
	if !r.Transmitting() {
		t.Fatal("TX; did not transmit")
	}
	if on, p := r.Carrier(); on {
		t.Fatalf("PTT in USB with no audio gives a carrier of %s", p)
	}
	c.cmd("RX;IF;")
	if st := c.status(); st.TX {
		t.Fatalf("status after RX: %+v", st)
	}
	c.cmd("TX2;ID;") // the tune carrier at the power setting
	c.expect("ID900;")
	if on, p := r.Carrier(); !on || p != 40*W {
		t.Fatalf("TX2 carrier %v %s, want the 40 W power setting", on, p)
	}
	c.cmd("RX;ID;")
	c.expect("ID900;")
	if r.Transmitting() {
		t.Fatal("RX; did not end the tune carrier")
	}
	c.cmd("PC000;TX2;") // no tune carrier of no power
	c.expect("?;")
}

func TestASCIITransmitOutOfBandRefused(t *testing.T) {
	r := newRadio(t, Opts{GeneralCoverage: true, FreqA: 9500 * kHz})
	c := startASCII(t, r, ASCIIOpts{})
	c.cmd("TX;")
	c.expect("?;")
	if r.Transmitting() {
		t.Fatal("transmitting outside the amateur bands")
	}
}

func TestASCIIPowerAndID(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{})
	c.cmd("PC;")
	c.expect("PC100;") // the default 100 W maximum, as three digits of watts
	c.cmd("PC050;PC;")
	c.expect("PC050;")
	if r.Power() != 50*W {
		t.Fatalf("power %s", r.Power())
	}
	c.cmd("PC150;") // above the 100 W maximum
	c.expect("?;")
	c.cmd("ID;")
	c.expect("ID900;")
	c.cmd("ID123;") // the ID cannot be set
	c.expect("?;")

	r4 := newRadio(t, Opts{})
	c4 := startASCII(t, r4, ASCIIOpts{ID: 650, Wire: wire.ASCIIOpts{IDDigits: 4}})
	c4.cmd("ID;")
	c4.expect("ID0650;")
}

func TestASCIIPowerRoundsToWatts(t *testing.T) {
	r := newRadio(t, Opts{})
	if err := r.SetPower(37*W + 600*physic.MilliWatt); err != nil {
		t.Fatal(err)
	}
	c := startASCII(t, r, ASCIIOpts{})
	c.cmd("PC;")
	c.expect("PC038;") // 37.6 W rounds to 38
}

func TestASCIIVFOSelect(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{})
	c.cmd("FR;")
	c.expect("FR0;")
	c.cmd("FR1;FR;")
	c.expect("FR1;")
	c.cmd("IF;")
	if st := c.status(); st.VFO != wire.VFOB || st.Freq != 7100*kHz {
		t.Fatalf("status on VFO B: %+v", st)
	}
	if r.VFO() != VFOB {
		t.Fatal("FR1; did not select VFO B")
	}
}

func TestASCIIErrors(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{})
	for _, in := range []string{"ZZ;", "FA123;", "hello;", "IF0;", "MD;MDX;", "RX1;", "fa;"} {
		c.cmd(in)
		if in == "MD;MDX;" {
			c.expect("MD2;")
		}
		c.expect("?;")
	}
	c.cmd("?;ID;") // a "?;" from the controller is not answered
	c.expect("ID900;")
	c.cmd("\r\nFA;\r\n") // line ends between frames are ignored
	c.expect("FA00014200000;")
}

// TestASCIIQueryAfterNoiseAnsweredAtOnce: a query that follows a burst of line noise is answered
// without the controller having to send anything more. The server's Scanner used to fall one
// read behind for every MaxASCIIFrame bytes of noise, so this query went unanswered until some
// 60 more had been sent (the client's read deadline turns that into a failure).
func TestASCIIQueryAfterNoiseAnsweredAtOnce(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{})
	// 8 KiB of printable noise without a ';': twice the link's buffer and the server Scanner's
	// first buffer (DefaultPipeBuffer; bufio's 4096 bytes, from the Go source).
	rng := rand.New(rand.NewPCG(1, 2))
	noise := make([]byte, 8<<10)
	for i := range noise {
		if noise[i] = byte(' ' + rng.IntN(95)); noise[i] == ';' {
			noise[i] = '#'
		}
	}
	c.cmd(string(noise) + ";FA;")
	c.expect("?;")             // the noise's tail, ended by the ';': refused like any garbage
	c.expect("FA00014200000;") // the radio's default frequency, as in TestASCIIFrequency
}

func TestASCIIAutoInfo(t *testing.T) {
	r := newRadio(t, Opts{})
	c := startASCII(t, r, ASCIIOpts{})
	c.cmd("AI;")
	c.expect("AI0;") // off until asked
	c.cmd("AI2;AI;")
	c.expect("AI2;")
	// Front-panel changes are reported.
	if err := r.SetFrequency(14074 * kHz); err != nil {
		t.Fatal(err)
	}
	c.expect("FA00014074000;")
	if err := r.SetVFOFrequency(VFOB, 7074*kHz); err != nil {
		t.Fatal(err)
	}
	c.expect("FB00007074000;")
	if err := r.SetMode(CW); err != nil {
		t.Fatal(err)
	}
	c.expect("MD3;")
	if err := r.SetPower(25 * W); err != nil {
		t.Fatal(err)
	}
	c.expect("PC025;")
	if err := r.Key(context.Background(), 10*W); err != nil {
		t.Fatal(err)
	}
	if st := c.status(); !st.TX || st.Freq != 14074*kHz {
		t.Fatalf("status report on keying: %+v", st)
	}
	if err := r.Unkey(context.Background()); err != nil {
		t.Fatal(err)
	}
	if st := c.status(); st.TX {
		t.Fatalf("status report on unkeying: %+v", st)
	}
	// The session's own changes are not reported back to it: the next frame is the ID.
	c.cmd("FA00014100000;MD2;ID;")
	c.expect("ID900;")
	// Off again: front-panel changes go unreported.
	c.cmd("AI0;AI;")
	c.expect("AI0;")
	if err := r.SetFrequency(14200 * kHz); err != nil {
		t.Fatal(err)
	}
	c.cmd("ID;")
	c.expect("ID900;")
}

func TestASCIIAutoInfoBetweenSessions(t *testing.T) {
	r := newRadio(t, Opts{})
	watcher := startASCII(t, r, ASCIIOpts{AutoInfo: 2})
	setter := startASCII(t, r, ASCIIOpts{})
	watcher.cmd("ID;") // the watcher's server is subscribed once it answers
	watcher.expect("ID900;")
	setter.cmd("FA00018100000;ID;")
	setter.expect("ID900;")
	watcher.expect("FA00018100000;") // one session's change is another's news
}

func TestASCIIRadioOffAnswersNothing(t *testing.T) {
	r := newRadio(t, Opts{Off: true})
	s := newScript("FA;ID;FA00007000000;TX;")
	if err := r.ServeASCII(context.Background(), s, ASCIIOpts{}); err != nil {
		t.Fatal(err)
	}
	if s.out.Len() != 0 {
		t.Fatalf("a radio switched off answered %q", s.out.String())
	}
	r.SwitchOn()
	if r.Frequency() != 14200*kHz || r.Transmitting() {
		t.Fatalf("commands sent while off took effect: %+v", r.State())
	}
	s = newScript("FA;ID;")
	if err := r.ServeASCII(context.Background(), s, ASCIIOpts{}); err != nil {
		t.Fatal(err)
	}
	if s.out.String() != "FA00014200000;ID900;" {
		t.Fatalf("after switching on: %q", s.out.String())
	}
}

func TestASCIIBadOptions(t *testing.T) {
	r := newRadio(t, Opts{})
	err := r.ServeASCII(context.Background(), newScript(""), ASCIIOpts{
		ID: 5000, AutoInfo: 7, Wire: wire.ASCIIOpts{FreqDigits: 20},
		Faults: Faults{Drop: 2, Corrupt: -1},
	})
	if err == nil {
		t.Fatal("ServeASCII accepted bad options")
	}
	for _, key := range []string{"Wire", "ID", "AutoInfo", "Faults.Drop", "Faults.Corrupt"} {
		if !strings.Contains(err.Error(), key) {
			t.Errorf("error %q does not name %s", err, key)
		}
	}
}

// asciiFaultRun feeds in to a server with faults f and returns what it sent and the virtual
// time its delays took.
func asciiFaultRun(t *testing.T, in string, f Faults) (string, int64) {
	t.Helper()
	r := newRadio(t, Opts{})
	clk := vclock.New(vclock.Epoch)
	s := newScript(in)
	if err := r.ServeASCII(context.Background(), s, ASCIIOpts{Faults: f, Clock: clk}); err != nil {
		t.Fatal(err)
	}
	return s.out.String(), int64(clk.Since(vclock.Epoch))
}

func ids(n int) string { return strings.Repeat("ID;", n) }

// within5Sigma checks a count of independent events of chance p in n trials against the
// binomial mean np, standard deviation √(np(1−p)) (binomial distribution, any statistics text).
func within5Sigma(t *testing.T, what string, k, n int, p float64) {
	t.Helper()
	mean := float64(n) * p
	sd := math.Sqrt(mean * (1 - p))
	if d := float64(k) - mean; d < -5*sd || d > 5*sd {
		t.Errorf("%s: %d of %d, expected %.0f ± %.1f", what, k, n, mean, 5*sd)
	}
}

func TestASCIIFaultDrop(t *testing.T) {
	const n, p = 400, 0.3
	// Each query has its own answer, so the output shows which replies were dropped.
	var in strings.Builder
	var replies []string
	for i := range n {
		fmt.Fprintf(&in, "PC%03d;PC;", i%101)
		replies = append(replies, fmt.Sprintf("PC%03d;", i%101))
	}
	out, _ := asciiFaultRun(t, in.String(), Faults{Seed: 1, Drop: p})
	kept, rest := 0, out
	for _, want := range replies {
		if strings.HasPrefix(rest, want) {
			rest = rest[len(want):]
			kept++
		}
	}
	if rest != "" {
		t.Fatalf("the output is not a subsequence of the replies; left over %q", rest)
	}
	within5Sigma(t, "replies kept", kept, n, 1-p)
	again, _ := asciiFaultRun(t, in.String(), Faults{Seed: 1, Drop: p})
	other, _ := asciiFaultRun(t, in.String(), Faults{Seed: 2, Drop: p})
	if again != out {
		t.Error("the same seed dropped different replies")
	}
	if other == out {
		t.Error("another seed dropped the same replies")
	}
}

func TestASCIIFaultCorrupt(t *testing.T) {
	const n, p = 400, 0.2
	const reply = "ID900;"
	out, _ := asciiFaultRun(t, ids(n), Faults{Seed: 7, Corrupt: p})
	if len(out) != n*len(reply) {
		t.Fatalf("corruption changed the length: %d bytes, want %d", len(out), n*len(reply))
	}
	bad := 0
	for i := 0; i < n; i++ {
		got := out[i*len(reply) : (i+1)*len(reply)]
		flipped := 0
		for j := range reply {
			for x := got[j] ^ reply[j]; x != 0; x &= x - 1 {
				flipped++
			}
		}
		switch flipped {
		case 0:
		case 1:
			bad++
		default:
			t.Fatalf("reply %d %q has %d bits flipped, want at most 1", i, got, flipped)
		}
	}
	within5Sigma(t, "replies corrupted", bad, n, p)
	if again, _ := asciiFaultRun(t, ids(n), Faults{Seed: 7, Corrupt: p}); again != out {
		t.Error("the same seed corrupted differently")
	}
}

func TestASCIIFaultDelay(t *testing.T) {
	const n, p = 400, 0.25
	const by = 300_000_000 // 300 ms in nanoseconds, an arbitrary delay
	out, elapsed := asciiFaultRun(t, ids(n), Faults{Seed: 3, Delay: p, DelayBy: by})
	if out != strings.Repeat("ID900;", n) {
		t.Fatalf("delaying lost or changed replies")
	}
	if elapsed%by != 0 {
		t.Fatalf("virtual time %d ns is not a whole number of delays", elapsed)
	}
	within5Sigma(t, "replies delayed", int(elapsed/by), n, p)
	if _, none := asciiFaultRun(t, ids(n), Faults{Seed: 3}); none != 0 {
		t.Fatalf("no delay configured, yet %d ns passed", none)
	}
}

func TestASCIIFaultsAllAtOnce(t *testing.T) {
	// A drop rate of 1 lets nothing through, whatever the other knobs do.
	out, _ := asciiFaultRun(t, ids(50), Faults{Seed: 11, Drop: 1, Corrupt: 1, Delay: 1})
	if out != "" {
		t.Fatalf("a drop rate of 1 let %q through", out)
	}
}

func TestASCIIServeErrorsOnLinkFailure(t *testing.T) {
	r := newRadio(t, Opts{})
	link := &failingWriter{script: newScript("ID;")}
	err := r.ServeASCII(context.Background(), link, ASCIIOpts{})
	if !errors.Is(err, errWire) {
		t.Fatalf("ServeASCII on a failing link = %v, want the write error", err)
	}
}

var errWire = errors.New("wire cut")

type failingWriter struct{ *script }

func (f *failingWriter) Write([]byte) (int, error) { return 0, errWire }

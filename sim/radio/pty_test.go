//go:build unix

package radio

import (
	"context"
	"errors"
	"os"
	"syscall"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/drivers/cat/wire"
)

// openPTY opens a pseudo-terminal and the client's side of it, as a serial-port client would
// open the device.
func openPTY(t *testing.T) (*PTY, *os.File) {
	t.Helper()
	if _, err := os.Stat("/dev/ptmx"); err != nil {
		t.Skipf("no pseudo-terminals here: %v", err)
	}
	p, path, err := OpenPTY()
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { p.Close() })
	if path != p.Path() || path == "" {
		t.Fatalf("path %q, Path() %q", path, p.Path())
	}
	dev, err := os.OpenFile(path, os.O_RDWR|syscall.O_NOCTTY, 0)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { dev.Close() })
	return p, dev
}

func TestASCIIOverPTY(t *testing.T) {
	r := newRadio(t, Opts{})
	p, dev := openPTY(t)
	stop := serving(t, func(ctx context.Context) error { return r.ServeASCII(ctx, p, ASCIIOpts{}) })
	c := &asciiClient{client: newClient(t, dev, wire.SplitASCII)}
	// No line end after the frames: in the terminal's cooked mode the server would not see
	// them. And had the terminal echo on, the server would read its own "ID900;", refuse it
	// and a "?;" would come before the frequency.
	c.cmd("ID;FA00007074000;FA;")
	c.expect("ID900;")
	c.expect("FA00007074000;")
	if r.Frequency() != 7074*kHz {
		t.Fatalf("frequency %s", r.Frequency())
	}
	// Bytes that a cooked terminal would translate or swallow pass unchanged.
	c.cmd("\x03\x1a\rID;")
	c.expect("?;") // the control characters arrive, as one malformed frame with the ID
	if err := stop(); !errors.Is(err, context.Canceled) {
		t.Fatalf("ServeASCII over a pty = %v, want context.Canceled", err)
	}
}

func TestBinaryOverPTY(t *testing.T) {
	r := newRadio(t, Opts{})
	p, dev := openPTY(t)
	serving(t, func(ctx context.Context) error { return r.ServeBinary(ctx, p, BinaryOpts{}) })
	c := &binaryClient{client: newClient(t, dev, wire.SplitBinary), echo: true}
	// 3.511 300 MHz encodes as 00 13 51 03 00: 0x13 is XOFF and 0x03 is ^C, which a cooked
	// terminal would act on instead of passing through.
	c.cmd("fe fe 94 e0 05 00 13 51 03 00 fd")
	c.expect("fe fe e0 94 fb fd")
	c.cmd("fe fe 94 e0 03 fd")
	c.expect("fe fe e0 94 03 00 13 51 03 00 fd")
	if r.Frequency() != 3511300*physic.Hertz {
		t.Fatalf("frequency %s", r.Frequency())
	}
}

func TestServeReturnsWhenPTYCloses(t *testing.T) {
	r := newRadio(t, Opts{})
	p, dev := openPTY(t)
	done := make(chan error, 1)
	go func() { done <- r.ServeASCII(context.Background(), p, ASCIIOpts{}) }()
	c := &asciiClient{client: newClient(t, dev, wire.SplitASCII)}
	c.cmd("ID;") // once answered, the server is blocked reading the master
	c.expect("ID900;")
	if err := p.Close(); err != nil {
		t.Fatal(err)
	}
	if err := result(t, done); err != nil {
		t.Fatalf("ServeASCII after the pty closed = %v, want nil", err)
	}
}

func TestPTYClientCanReconnect(t *testing.T) {
	r := newRadio(t, Opts{})
	p, dev := openPTY(t)
	serving(t, func(ctx context.Context) error { return r.ServeASCII(ctx, p, ASCIIOpts{}) })
	c := &asciiClient{client: newClient(t, dev, wire.SplitASCII)}
	c.cmd("ID;")
	c.expect("ID900;")
	dev.Close() // the controller goes away; the server must not see the end of input
	dev2, err := os.OpenFile(p.Path(), os.O_RDWR|syscall.O_NOCTTY, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer dev2.Close()
	c2 := &asciiClient{client: newClient(t, dev2, wire.SplitASCII)}
	c2.cmd("FA;")
	c2.expect("FA00014200000;")
}

func TestPTYDeadlineInterruptsRead(t *testing.T) {
	// A Read blocked on the master must return when its deadline passes: that is how a server
	// stops when its context ends. (A blocking descriptor would sleep in the kernel for ever,
	// and the safety timeout would fail the test.)
	p, _ := openPTY(t)
	if err := p.SetReadDeadline(time.Now().Add(100 * time.Millisecond)); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() {
		_, err := p.Read(make([]byte, 16))
		done <- err
	}()
	if err := result(t, done); !errors.Is(err, os.ErrDeadlineExceeded) {
		t.Fatalf("blocked Read = %v, want os.ErrDeadlineExceeded", err)
	}
}

func TestServeOverPTYStopsWithContext(t *testing.T) {
	r := newRadio(t, Opts{})
	p, dev := openPTY(t)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- r.ServeBinary(ctx, p, BinaryOpts{NoEcho: true}) }()
	c := &binaryClient{client: newClient(t, dev, wire.SplitBinary)}
	c.cmd("fe fe 94 e0 19 00 fd")
	c.expect("fe fe e0 94 19 00 94 fd")
	cancel()
	if err := result(t, done); !errors.Is(err, context.Canceled) {
		t.Fatalf("ServeBinary = %v, want context.Canceled", err)
	}
}

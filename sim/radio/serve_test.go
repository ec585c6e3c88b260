package radio

import (
	"context"
	"errors"
	"io"
	"os"
	"sync"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/drivers/cat/wire"
)

// result waits for a server's error, failing the test if it does not return.
func result(t *testing.T, done <-chan error) error {
	t.Helper()
	select {
	case err := <-done:
		return err
	case <-time.After(safety):
		t.Fatal("no result within the safety timeout")
		return nil
	}
}

func TestServeReturnsWhenContextEnds(t *testing.T) {
	for _, binary := range []bool{false, true} {
		r := newRadio(t, Opts{})
		radioEnd, ctl := Pipe(0)
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() {
			if binary {
				done <- r.ServeBinary(ctx, radioEnd, BinaryOpts{NoEcho: true})
			} else {
				done <- r.ServeASCII(ctx, radioEnd, ASCIIOpts{})
			}
		}()
		// One exchange, so that the server is surely running and then blocked reading.
		if binary {
			c := &binaryClient{client: newClient(t, ctl, wire.SplitBinary)}
			c.cmd("fe fe 94 e0 19 00 fd")
			c.expect("fe fe e0 94 19 00 94 fd")
		} else {
			c := &asciiClient{client: newClient(t, ctl, wire.SplitASCII)}
			c.cmd("ID;")
			c.expect("ID900;")
		}
		cancel()
		if err := result(t, done); !errors.Is(err, context.Canceled) {
			t.Fatalf("binary %v: Serve = %v, want context.Canceled", binary, err)
		}
	}
}

func TestServeReturnsWhenLinkCloses(t *testing.T) {
	r := newRadio(t, Opts{})
	radioEnd, ctl := Pipe(0)
	done := make(chan error, 1)
	go func() { done <- r.ServeBinary(context.Background(), radioEnd, BinaryOpts{}) }()
	if err := ctl.Close(); err != nil {
		t.Fatal(err)
	}
	if err := result(t, done); err != nil {
		t.Fatalf("Serve after the controller hung up = %v, want nil", err)
	}
}

func TestServeStopsWhileBlockedWriting(t *testing.T) {
	// A controller that never reads: the link's 16-byte buffer fills with reports and the
	// server blocks in Write. Cancelling must still stop it.
	r := newRadio(t, Opts{})
	radioEnd, ctl := Pipe(16)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- r.ServeASCII(ctx, radioEnd, ASCIIOpts{AutoInfo: 2}) }()
	if _, err := ctl.Write([]byte("ID;")); err != nil { // the server answers once subscribed
		t.Fatal(err)
	}
	for i := range 20 { // 20 reports of 14 bytes each: far more than 16 bytes
		if err := r.SetFrequency(14000*kHz + physic.Frequency(i)*kHz); err != nil {
			t.Fatal(err)
		}
	}
	cancel()
	if err := result(t, done); !errors.Is(err, context.Canceled) {
		t.Fatalf("Serve = %v, want context.Canceled", err)
	}
}

func TestPipe(t *testing.T) {
	a, b := Pipe(4)
	// A write larger than the buffer completes as the reader drains it.
	done := make(chan error, 1)
	go func() {
		_, err := a.Write([]byte("0123456789"))
		done <- err
	}()
	got, err := io.ReadAll(io.LimitReader(b, 10))
	if err != nil || string(got) != "0123456789" {
		t.Fatalf("read %q, %v", got, err)
	}
	if err := result(t, done); err != nil {
		t.Fatal(err)
	}
	// A past deadline fails a blocked read at once; clearing it restores reads.
	if err := b.SetReadDeadline(time.Unix(1, 0)); err != nil {
		t.Fatal(err)
	}
	if _, err := b.Read(make([]byte, 1)); !errors.Is(err, os.ErrDeadlineExceeded) {
		t.Fatalf("read past the deadline = %v", err)
	}
	if err := b.SetReadDeadline(time.Time{}); err != nil {
		t.Fatal(err)
	}
	if _, err := a.Write([]byte("x")); err != nil {
		t.Fatal(err)
	}
	if n, err := b.Read(make([]byte, 4)); n != 1 || err != nil {
		t.Fatalf("read after clearing the deadline: %d, %v", n, err)
	}
	// Closing one end: the other reads what is left, then EOF, and cannot write.
	if _, err := a.Write([]byte("yz")); err != nil {
		t.Fatal(err)
	}
	if err := a.Close(); err != nil {
		t.Fatal(err)
	}
	rest, err := io.ReadAll(b)
	if err != nil || string(rest) != "yz" {
		t.Fatalf("after close: %q, %v", rest, err)
	}
	if _, err := b.Write([]byte("q")); !errors.Is(err, io.ErrClosedPipe) {
		t.Fatalf("write to a closed peer = %v", err)
	}
	if _, err := a.Read(make([]byte, 1)); !errors.Is(err, io.ErrClosedPipe) {
		t.Fatalf("read on a closed end = %v", err)
	}
}

func TestPipeDeadlineInterruptsBlockedWrite(t *testing.T) {
	a, _ := Pipe(1)
	if _, err := a.Write([]byte("x")); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() {
		_, err := a.Write([]byte("y")) // the buffer is full: blocks
		done <- err
	}()
	if err := a.SetWriteDeadline(time.Unix(1, 0)); err != nil {
		t.Fatal(err)
	}
	if err := result(t, done); !errors.Is(err, os.ErrDeadlineExceeded) {
		t.Fatalf("blocked write after a past deadline = %v", err)
	}
}

// TestConcurrentUse drives one radio from the front panel, an ASCII controller, a binary
// controller and a subscriber at once; run with -race.
func TestConcurrentUse(t *testing.T) {
	const n = 200
	r := newRadio(t, Opts{})
	ascii := startASCII(t, r, ASCIIOpts{AutoInfo: 2})
	bin := startBinary(t, r, BinaryOpts{})
	sub := r.Subscribe(4)
	defer sub.Close()

	var wg sync.WaitGroup
	errs := make(chan error, 8)
	wg.Add(1)
	go func() { // the front panel
		defer wg.Done()
		ctx := context.Background()
		for i := range n {
			f := 14000*kHz + physic.Frequency(i)*kHz
			if err := r.SetFrequency(f); err != nil {
				errs <- err
				return
			}
			if err := r.SetMode([]Mode{USB, CW, FM}[i%3]); err != nil {
				errs <- err
				return
			}
			if i%10 == 0 {
				_ = r.Key(ctx, 5*W)
				_, _ = r.Carrier()
				_ = r.Unkey(ctx)
			}
		}
	}()
	wg.Add(1)
	go func() { // the subscriber reads until the radio has gone quiet
		defer wg.Done()
		for range sub.Events() {
		}
	}()
	// The controllers write from one goroutine and count from another, since unsolicited
	// reports are interleaved with the answers.
	wg.Add(2)
	go func() {
		defer wg.Done()
		for i := range n {
			cmd := "FA000" + []string{"07050000", "21200000"}[i%2] + ";ID;"
			if _, err := ascii.link.Write([]byte(cmd)); err != nil {
				errs <- err
				return
			}
		}
	}()
	go func() {
		defer wg.Done()
		frame := hx(t, "fe fe 94 e0 19 00 fd fe fe 94 e0 03 fd")
		for range n {
			if _, err := bin.link.Write(frame); err != nil {
				errs <- err
				return
			}
		}
	}()
	asciiIDs, binIDs := 0, 0
	var readers sync.WaitGroup
	readers.Add(2)
	go func() {
		defer readers.Done()
		for asciiIDs < n {
			f, err := ascii.read()
			if err != nil {
				t.Error(err)
				return
			}
			m, err := wire.ParseASCII(f, wire.ASCIIOpts{})
			if err != nil || m.Cmd == wire.CmdError {
				t.Errorf("ascii frame %q: %v", f, err)
				return
			}
			if m.Cmd == wire.CmdID {
				asciiIDs++
			}
		}
	}()
	go func() {
		defer readers.Done()
		for binIDs < n {
			f, err := bin.read()
			if err != nil {
				t.Error(err)
				return
			}
			m, err := wire.ParseBinary(f)
			if err != nil || m.Cmd == wire.BinNG {
				t.Errorf("binary frame % x: %v", f, err)
				return
			}
			if m.Cmd == wire.BinID && !m.Query {
				binIDs++
			}
		}
	}()
	readers.Wait()
	sub.Close() // ends the subscriber's loop
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
	if asciiIDs != n || binIDs != n {
		t.Fatalf("answers to ID: ascii %d, binary %d, want %d each", asciiIDs, binIDs, n)
	}
}

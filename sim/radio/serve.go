package radio

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"net"
	"os"
	"sync"
	"time"

	"github.com/tankd/tankd/controller/clock"
)

// Faults are the CAT servers' seeded misbehaviours. Each rate is the chance, 0 to 1, that it
// strikes a frame the radio sends (a reply or an unsolicited report; never the bus echo). The
// same seed and the same exchange give the same faults.
type Faults struct {
	// Seed seeds the faults' random source (PCG).
	Seed uint64
	// Drop is the chance that a frame is not sent at all.
	Drop float64
	// Corrupt is the chance that one bit of one byte of a frame is flipped.
	Corrupt float64
	// Delay is the chance that a frame is held back by DelayBy before it is sent.
	Delay float64
	// DelayBy is how long a delayed frame waits, on the server's clock. Default 500 ms, longer
	// than the usual CAT reply timeouts of a few hundred milliseconds (common practice).
	DelayBy time.Duration
}

func (f Faults) resolve() (Faults, error) {
	if f.DelayBy == 0 {
		f.DelayBy = 500 * time.Millisecond
	}
	var errs []error
	for _, r := range []struct {
		key string
		v   float64
	}{{"Drop", f.Drop}, {"Corrupt", f.Corrupt}, {"Delay", f.Delay}} {
		if !(r.v >= 0 && r.v <= 1) {
			errs = append(errs, fmt.Errorf("Faults.%s: %g, want 0 to 1", r.key, r.v))
		}
	}
	if f.DelayBy < 0 {
		errs = append(errs, fmt.Errorf("Faults.DelayBy: %s, want 0 or more", f.DelayBy))
	}
	return f, errors.Join(errs...)
}

// session is one CAT server run: the link, the faults and who the radio should not tell about
// its own changes.
type session struct {
	r      *Radio
	link   io.ReadWriter
	clk    clock.Clock
	faults Faults
	rng    *rand.Rand
	origin uint64

	wmu sync.Mutex // serialises the bus echo (reader goroutine) with replies
}

func (r *Radio) newSession(link io.ReadWriter, clk clock.Clock, f Faults) *session {
	if clk == nil {
		clk = clock.Wall{}
	}
	return &session{
		r: r, link: link, clk: clk, faults: f,
		rng:    rand.New(rand.NewPCG(f.Seed, f.Seed^0x9e3779b97f4a7c15)),
		origin: r.newOrigin(),
	}
}

// send writes one frame the radio originates, through the fault knobs. A radio that is off
// sends nothing. The random draws are the same in number for every frame, so that one knob's
// rate does not change where the others strike.
func (s *session) send(ctx context.Context, frame []byte) error {
	if !s.r.State().On {
		return nil
	}
	drop := s.rng.Float64() < s.faults.Drop
	corrupt := s.rng.Float64() < s.faults.Corrupt
	at, bit := s.rng.IntN(len(frame)), s.rng.IntN(8)
	delay := s.rng.Float64() < s.faults.Delay
	if delay {
		if err := s.clk.Sleep(ctx, s.faults.DelayBy); err != nil {
			return err
		}
	}
	if drop {
		return nil
	}
	if corrupt {
		frame = bytes.Clone(frame)
		frame[at] ^= 1 << bit
	}
	return s.write(frame)
}

func (s *session) write(b []byte) error {
	s.wmu.Lock()
	defer s.wmu.Unlock()
	_, err := s.link.Write(b)
	return err
}

// echoReader returns every byte it reads to the sender, as the single shared wire of the binary
// bus does.
type echoReader struct{ s *session }

func (e echoReader) Read(p []byte) (int, error) {
	n, err := e.s.link.Read(p)
	if n > 0 {
		if werr := e.s.write(p[:n]); werr != nil && err == nil {
			err = werr
		}
	}
	return n, err
}

// dialect is what differs between the two CAT servers.
type dialect struct {
	name   string
	split  bufio.SplitFunc
	echo   bool
	handle func(ctx context.Context, frame []byte) error // one frame from the controller
	notify func(ctx context.Context, ev Event) error     // one change of the radio
}

// serve runs a CAT server until ctx ends (returning ctx's error), the link closes (nil) or the
// link fails. It owns one reader goroutine and waits for it before returning.
func (s *session) serve(ctx context.Context, d dialect) error {
	sub := s.r.Subscribe(64)
	defer sub.Close()

	inner, cancel := context.WithCancel(ctx)
	defer cancel()
	var in io.Reader = s.link
	if d.echo {
		in = echoReader{s}
	}
	frames := make(chan []byte, 16)
	readErr := make(chan error, 1)
	readerDone := make(chan struct{})
	go func() {
		defer close(readerDone)
		defer close(frames)
		sc := bufio.NewScanner(in)
		sc.Split(d.split)
		for sc.Scan() {
			select {
			case frames <- bytes.Clone(sc.Bytes()):
			case <-inner.Done():
				return
			}
		}
		readErr <- sc.Err()
	}()
	// A blocked Read or Write does not watch ctx, so when the server stops with the reader
	// still running, the link is unblocked with a past deadline, or closed if it has none.
	unblocked := make(chan struct{})
	stop := context.AfterFunc(inner, func() {
		defer close(unblocked)
		select {
		case <-readerDone:
		default:
			unblock(s.link)
		}
	})
	defer func() {
		cancel()
		if !stop() {
			<-unblocked
		}
		<-readerDone
	}()

	fail := func(err error) error {
		if ctx.Err() != nil {
			return ctx.Err()
		}
		if err == nil || linkClosed(err) {
			return nil
		}
		return fmt.Errorf("serve %s cat: %w", d.name, err)
	}
	for {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case f, ok := <-frames:
			if !ok {
				return fail(<-readErr)
			}
			if err := d.handle(inner, f); err != nil {
				return fail(err)
			}
		case ev := <-sub.Events():
			if err := s.notify(inner, d, ev); err != nil {
				return fail(err)
			}
		}
	}
}

// notify passes on a change unless this session caused it or the radio is off.
func (s *session) notify(ctx context.Context, d dialect, ev Event) error {
	if ev.origin == s.origin || !ev.State.On {
		return nil
	}
	return d.notify(ctx, ev)
}

// unblock makes pending I/O on link return: a deadline in the past where the link has
// deadlines, else Close.
func unblock(link io.ReadWriter) {
	if d, ok := link.(interface{ SetDeadline(time.Time) error }); ok {
		if d.SetDeadline(time.Unix(1, 0)) == nil {
			return
		}
	}
	if c, ok := link.(io.Closer); ok {
		_ = c.Close()
	}
}

// linkClosed reports the errors that mean the other end went away or the link was closed.
func linkClosed(err error) bool {
	return errors.Is(err, io.EOF) || errors.Is(err, io.ErrClosedPipe) ||
		errors.Is(err, net.ErrClosed) || errors.Is(err, os.ErrClosed)
}

package radio

import (
	"io"
	"os"
	"sync"
	"time"
)

// DefaultPipeBuffer is how many bytes each direction of a Pipe holds before a writer waits: the
// order of a serial port's kernel buffer (common practice).
const DefaultPipeBuffer = 4096

// Pipe returns the two ends of an in-memory serial link: what one end writes, the other reads.
// Unlike net.Pipe, each direction buffers up to size bytes (DefaultPipeBuffer if size < 1), as
// a serial line with its driver buffers does, so that a controller may send a command before it
// has read the echo of the last one. Both ends support deadlines; after Close of one end, the
// other reads what is left and then io.EOF, and its writes fail with io.ErrClosedPipe.
func Pipe(size int) (radioEnd, controllerEnd *PipeEnd) {
	if size < 1 {
		size = DefaultPipeBuffer
	}
	ab, ba := newHalfPipe(size), newHalfPipe(size)
	return newPipeEnd(ba, ab), newPipeEnd(ab, ba)
}

// halfPipe is one direction of a Pipe.
type halfPipe struct {
	mu           sync.Mutex
	buf          []byte
	size         int
	readerClosed bool
	writerClosed bool
	readable     chan struct{} // signalled when bytes arrive or the writer closes
	writable     chan struct{} // signalled when room appears or the reader closes
}

func newHalfPipe(size int) *halfPipe {
	return &halfPipe{size: size, readable: make(chan struct{}, 1), writable: make(chan struct{}, 1)}
}

func signal(c chan struct{}) {
	select {
	case c <- struct{}{}:
	default:
	}
}

// PipeEnd is one end of a Pipe. It implements io.ReadWriteCloser and the deadline methods of
// net.Conn.
type PipeEnd struct {
	rx, tx     *halfPipe
	rdl, wdl   *deadline
	closeOnce  sync.Once
	closedChan chan struct{}
}

func newPipeEnd(rx, tx *halfPipe) *PipeEnd {
	return &PipeEnd{rx: rx, tx: tx, rdl: newDeadline(), wdl: newDeadline(), closedChan: make(chan struct{})}
}

// Read implements io.Reader.
func (e *PipeEnd) Read(p []byte) (int, error) {
	h := e.rx
	for {
		select {
		case <-e.closedChan:
			return 0, io.ErrClosedPipe
		case <-e.rdl.wait():
			return 0, os.ErrDeadlineExceeded
		default:
		}
		h.mu.Lock()
		if len(h.buf) > 0 {
			n := copy(p, h.buf)
			h.buf = h.buf[n:]
			h.mu.Unlock()
			signal(h.writable)
			return n, nil
		}
		if h.writerClosed {
			h.mu.Unlock()
			return 0, io.EOF
		}
		h.mu.Unlock()
		select {
		case <-h.readable:
		case <-e.rdl.wait():
		case <-e.closedChan:
		}
	}
}

// Write implements io.Writer. It waits while the other end's buffer is full.
func (e *PipeEnd) Write(p []byte) (int, error) {
	h := e.tx
	written := 0
	for {
		select {
		case <-e.closedChan:
			return written, io.ErrClosedPipe
		case <-e.wdl.wait():
			return written, os.ErrDeadlineExceeded
		default:
		}
		h.mu.Lock()
		if h.readerClosed {
			h.mu.Unlock()
			return written, io.ErrClosedPipe
		}
		if len(p) == 0 {
			h.mu.Unlock()
			return written, nil
		}
		if room := h.size - len(h.buf); room > 0 {
			n := min(room, len(p))
			h.buf = append(h.buf, p[:n]...)
			p, written = p[n:], written+n
			h.mu.Unlock()
			signal(h.readable)
			continue
		}
		h.mu.Unlock()
		select {
		case <-h.writable:
		case <-e.wdl.wait():
		case <-e.closedChan:
		}
	}
}

// Close implements io.Closer: this end's pending and later reads and writes fail with
// io.ErrClosedPipe.
func (e *PipeEnd) Close() error {
	e.closeOnce.Do(func() {
		close(e.closedChan)
		e.rx.mu.Lock()
		e.rx.readerClosed = true
		e.rx.mu.Unlock()
		signal(e.rx.writable)
		e.tx.mu.Lock()
		e.tx.writerClosed = true
		e.tx.mu.Unlock()
		signal(e.tx.readable)
	})
	return nil
}

// SetDeadline sets both the read and the write deadline, as net.Conn's does.
func (e *PipeEnd) SetDeadline(t time.Time) error {
	e.rdl.set(t)
	e.wdl.set(t)
	return nil
}

// SetReadDeadline makes pending and later reads fail with os.ErrDeadlineExceeded once t has
// passed; the zero time means no deadline.
func (e *PipeEnd) SetReadDeadline(t time.Time) error {
	e.rdl.set(t)
	return nil
}

// SetWriteDeadline is SetReadDeadline for writes.
func (e *PipeEnd) SetWriteDeadline(t time.Time) error {
	e.wdl.set(t)
	return nil
}

// deadline is a wall-clock I/O deadline: a channel that is closed when it passes. Deadlines are
// a link's safety net against a peer that never answers, so they run on real time even in
// simulations on a virtual clock.
type deadline struct {
	mu     sync.Mutex
	timer  *time.Timer
	passed chan struct{}
}

func newDeadline() *deadline { return &deadline{passed: make(chan struct{})} }

func (d *deadline) set(t time.Time) {
	d.mu.Lock()
	defer d.mu.Unlock()
	if d.timer != nil && !d.timer.Stop() {
		<-d.passed // the timer fired: wait until it has closed the channel
	}
	d.timer = nil
	closed := isClosed(d.passed)
	if t.IsZero() {
		if closed {
			d.passed = make(chan struct{})
		}
		return
	}
	if wait := time.Until(t); wait > 0 {
		if closed {
			d.passed = make(chan struct{})
		}
		passed := d.passed
		d.timer = time.AfterFunc(wait, func() { close(passed) })
		return
	}
	if !closed {
		close(d.passed)
	}
}

func (d *deadline) wait() <-chan struct{} {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.passed
}

func isClosed(c chan struct{}) bool {
	select {
	case <-c:
		return true
	default:
		return false
	}
}

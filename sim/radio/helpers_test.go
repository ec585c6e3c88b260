package radio

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"testing"
	"time"
)

// safety bounds every wait on another goroutine. It never expires in a passing run; it only
// turns a hang into a failure.
const safety = 5 * time.Second

// deadliner is a link end a test can put a read deadline on.
type deadliner interface {
	io.ReadWriter
	SetReadDeadline(time.Time) error
}

// client is the controller's side of a link: it writes frames and reads them back one at a time.
type client struct {
	t    *testing.T
	link deadliner
	sc   *bufio.Scanner
}

func newClient(t *testing.T, link deadliner, split bufio.SplitFunc) *client {
	sc := bufio.NewScanner(link)
	sc.Split(split)
	return &client{t: t, link: link, sc: sc}
}

func (c *client) send(b []byte) {
	c.t.Helper()
	if _, err := c.link.Write(b); err != nil {
		c.t.Fatalf("write % x: %v", b, err)
	}
}

// read reads the next frame; it may be called from any one goroutine at a time.
func (c *client) read() ([]byte, error) {
	if err := c.link.SetReadDeadline(time.Now().Add(safety)); err != nil {
		return nil, err
	}
	if !c.sc.Scan() {
		return nil, fmt.Errorf("no frame: %v", c.sc.Err())
	}
	return bytes.Clone(c.sc.Bytes()), nil
}

// next reads the next frame, failing the test if none arrives. Test goroutine only.
func (c *client) next() []byte {
	c.t.Helper()
	f, err := c.read()
	if err != nil {
		c.t.Fatal(err)
	}
	return f
}

// serving runs serve in a goroutine for the test's duration. The returned stop cancels it and
// returns its error; cleanup does the same and requires context.Canceled.
func serving(t *testing.T, serve func(ctx context.Context) error) (stop func() error) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- serve(ctx) }()
	var result error
	stopped := false
	stop = func() error {
		if !stopped {
			stopped = true
			cancel()
			select {
			case result = <-done:
			case <-time.After(safety):
				t.Fatal("server did not stop")
			}
		}
		return result
	}
	t.Cleanup(func() {
		if err := stop(); err != nil && !errors.Is(err, context.Canceled) {
			t.Errorf("server: %v", err)
		}
	})
	return stop
}

// script is a link whose controller side is fixed in advance: the server reads in, then meets
// end of input, and everything it writes lands in out. Serve returns by itself, so the test
// needs no goroutine and sees every byte.
type script struct {
	io.Reader
	out bytes.Buffer
}

func (s *script) Write(p []byte) (int, error) { return s.out.Write(p) }

func newScript(in string) *script { return &script{Reader: strings.NewReader(in)} }

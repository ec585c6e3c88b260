package main

import (
	"bufio"
	"context"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/tune"
)

// TestDaemonFollowsTheRadio runs the daemon on the simulator with a virtual clock: it
// calibrates at start, follows a frequency set over the pseudo-terminal's CAT link, keeps what
// it learned in its state directory, and shuts down cleanly; a second start finds it all.
func TestDaemonFollowsTheRadio(t *testing.T) {
	state := t.TempDir()
	lines, stop := startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	cat := wait(t, lines, regexp.MustCompile(`cat=(/dev/pts/\d+)`))
	wait(t, lines, regexp.MustCompile(`outcome=calibrated freq=3.750MHz`))
	f, err := os.OpenFile(cat[1], os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := f.WriteString("FA00001850000;"); err != nil {
		t.Fatal(err)
	}
	f.Close()
	wait(t, lines, regexp.MustCompile(`msg=done component=tune outcome=tuned freq=1.850MHz`))
	stop()
	m, err := memmap.Load(filepath.Join(state, "loop.map"), memmap.Options{})
	if err != nil || m.Len() != 2 {
		t.Fatalf("memory map after the run: %v, %v; want two points", m, err)
	}
	if c, err := tune.LoadCalibration(filepath.Join(state, "backlash")); err != nil || c.Backlash != 40 {
		t.Fatalf("calibration after the run: %+v, %v; want the demo's 40 steps", c, err)
	}
	lines, stop = startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`msg="backlash calibration" steps=40`))
	wait(t, lines, regexp.MustCompile(`msg=prediction component=tune source=map`))
	wait(t, lines, regexp.MustCompile(`outcome=tuned freq=3.750MHz`))
	stop()
}

func TestParseRejects(t *testing.T) {
	for _, args := range [][]string{{"-sim-clock", "sundial"}, {"-log-level", "loud"}, {"extra"}} {
		if _, err := parse(args); err == nil {
			t.Errorf("accepted %v", args)
		}
	}
}

// startDaemon runs serve with its log going to a channel of lines.
func startDaemon(t *testing.T, o options) (<-chan string, func()) {
	t.Helper()
	pr, pw := io.Pipe()
	lines := make(chan string, 1024)
	go func() {
		sc := bufio.NewScanner(pr)
		for sc.Scan() {
			lines <- sc.Text()
		}
		close(lines)
	}()
	log := slog.New(slog.NewTextHandler(pw, &slog.HandlerOptions{Level: o.level}))
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- serve(ctx, o, log) }()
	return lines, func() {
		cancel()
		select {
		case err := <-done:
			if err != nil {
				t.Errorf("serve: %v", err)
			}
		case <-time.After(30 * time.Second):
			t.Fatal("the daemon did not stop")
		}
		pw.Close()
	}
}

// wait reads log lines until one matches; the timeout is a safety net (the virtual clock makes
// the daemon's work take milliseconds).
func wait(t *testing.T, lines <-chan string, re *regexp.Regexp) []string {
	t.Helper()
	var seen []string
	deadline := time.After(30 * time.Second)
	for {
		select {
		case l, ok := <-lines:
			if !ok {
				t.Fatalf("log ended before %q:\n%s", re, strings.Join(seen, "\n"))
			}
			seen = append(seen, l)
			if m := re.FindStringSubmatch(l); m != nil {
				return m
			}
		case <-deadline:
			t.Fatalf("no log line matching %q:\n%s", re, strings.Join(seen, "\n"))
		}
	}
}

package main

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"syscall"
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
	wait(t, lines, regexp.MustCompile(`msg="backlash calibration" component=state steps=40`))
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

// A second daemon on the same state directory is refused, and told who holds it.
func TestSecondDaemonRefused(t *testing.T) {
	state := t.TempDir()
	lines, stop := startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`outcome=calibrated`))
	err := serve(context.Background(), options{state: state, virtual: true}, slog.New(slog.DiscardHandler))
	if err == nil || !strings.Contains(err.Error(), fmt.Sprintf("in use by process %d", os.Getpid())) {
		t.Errorf("second daemon: %v", err)
	}
	stop()
}

// A memory map damaged beyond repair (both copies) is set aside, never deleted, and the daemon
// starts with an empty map and says so loudly.
func TestDamagedMapSetAsideAndStartsEmpty(t *testing.T) {
	state := t.TempDir()
	for _, name := range []string{"loop.map", "loop.map.prev"} {
		if err := os.WriteFile(filepath.Join(state, name), []byte("tankd-tunemap 1\nthis is not a map\n"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	lines, stop := startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`level=ERROR msg="MEMORY MAP LOST: the memory map was damaged beyond repair and has been set aside`))
	wait(t, lines, regexp.MustCompile(`outcome=calibrated`))
	stop()
	aside, err := filepath.Glob(filepath.Join(state, "loop.map*.damaged-*"))
	if err != nil || len(aside) != 2 {
		t.Errorf("damaged copies set aside: %v, %v; want both", aside, err)
	}
	for _, f := range aside {
		if b, err := os.ReadFile(f); err != nil || !strings.Contains(string(b), "this is not a map") {
			t.Errorf("%s: %q, %v", f, b, err)
		}
	}
	if m, err := memmap.Load(filepath.Join(state, "loop.map"), memmap.Options{}); err != nil || m.Len() == 0 {
		t.Errorf("the new map: %v, %v", m, err)
	}
}

// A clean stop leaves a marker with the motor's position: the next start trusts it and goes
// straight to the learned point. Without the marker (a crash) the position is not trusted and is
// found again from the dip before the map is used.
func TestCleanStopMarker(t *testing.T) {
	state := t.TempDir()
	lines, stop := startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`outcome=calibrated`))
	stop()
	if _, err := os.Stat(filepath.Join(state, "clean-stop")); err != nil {
		t.Fatalf("no clean-stop marker after a clean stop: %v", err)
	}
	lines, stop = startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	if l := wait(t, lines, regexp.MustCompile(`msg=state component=tune to=(referencing|positioning)`)); l[1] != "positioning" {
		t.Errorf("after a clean stop the first tune went %s", l[1])
	}
	wait(t, lines, regexp.MustCompile(`outcome=tuned`))
	stop()

	// the marker is taken at start, so a run that ends without one looks like a crash
	if err := os.Remove(filepath.Join(state, "clean-stop")); err != nil {
		t.Fatal(err)
	}
	lines, stop = startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`no clean stop recorded`))
	if l := wait(t, lines, regexp.MustCompile(`msg=state component=tune to=(referencing|positioning)`)); l[1] != "referencing" {
		t.Errorf("after a crash the first tune went %s", l[1])
	}
	wait(t, lines, regexp.MustCompile(`outcome=tuned`))
	stop()
}

// SIGHUP asks for a reset, as an operator would after a fault.
func TestSIGHUPResets(t *testing.T) {
	lines, stop := startDaemon(t, options{state: t.TempDir(), autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`outcome=calibrated`))
	if err := syscall.Kill(os.Getpid(), syscall.SIGHUP); err != nil {
		t.Fatal(err)
	}
	wait(t, lines, regexp.MustCompile(`SIGHUP: resetting`))
	wait(t, lines, regexp.MustCompile(`msg="request done" component=service kind=reset outcome=reset`))
	stop()
}

// childEnv makes the test binary run the daemon on the wall clock, for TestKillNineDistrusts.
const childEnv = "TANKD_TEST_DAEMON_STATE"

// After a kill -9 in the middle of a move the daemon starts with the position untrusted and
// finds it again from a dip before it tunes from the map; the state directory's lock died with
// the killed process.
func TestKillNineDistrusts(t *testing.T) {
	if dir := os.Getenv(childEnv); dir != "" {
		log := slog.New(slog.NewTextHandler(os.Stdout, &slog.HandlerOptions{Level: slog.LevelInfo}))
		_ = serve(context.Background(), options{state: dir, autoTune: true}, log)
		os.Exit(0)
	}
	state := t.TempDir()
	// a first, clean run: the map and the calibration, and a clean-stop marker
	lines, stop := startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`outcome=calibrated`))
	stop()

	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe, "-test.run=^TestKillNineDistrusts$")
	cmd.Env = append(os.Environ(), childEnv+"="+state)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	child := make(chan string, 256)
	go func() {
		sc := bufio.NewScanner(out)
		for sc.Scan() {
			child <- sc.Text()
		}
		close(child)
	}()
	// on the wall clock the tune takes a while: kill it while the motor moves toward the dip
	wait(t, child, regexp.MustCompile(`msg=move component=tune|msg=state component=tune to=positioning`))
	if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	_ = cmd.Wait()

	lines, stop = startDaemon(t, options{state: state, autoTune: true, virtual: true, level: slog.LevelInfo})
	wait(t, lines, regexp.MustCompile(`no clean stop recorded`))
	if l := wait(t, lines, regexp.MustCompile(`msg=state component=tune to=(referencing|positioning)`)); l[1] != "referencing" {
		t.Errorf("after a kill -9 the first tune went %s", l[1])
	}
	wait(t, lines, regexp.MustCompile(`outcome=tuned`))
	stop()
}

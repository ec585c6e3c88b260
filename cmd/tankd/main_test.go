package main

import (
	"bufio"
	"bytes"
	"context"
	"fmt"
	"log/slog"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"regexp"
	"strings"
	"syscall"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/tune"
)

// testDaemon is the daemon on the simulator and the virtual clock, run by serve in-process; the
// tests watch it through its service, never through its log.
type testDaemon struct {
	t    *testing.T
	d    *daemon
	sub  *controller.Subscription
	stop func()
}

// start runs the embedded configuration (edited by edit, if set) on state.
func start(t *testing.T, state string, edit func(*fileConfig)) *testDaemon {
	t.Helper()
	cfg := defaultFile(true)
	cfg.State.Dir = state
	cfg.HTTP.Listen = "127.0.0.1:0" // a free port
	if edit != nil {
		edit(&cfg)
	}
	if err := cfg.validate(); err != nil {
		t.Fatal(err)
	}
	ready := make(chan *testDaemon, 1)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	o := options{virtual: true, ready: func(d *daemon) {
		// subscribed before the daemon's first request, so that nothing is missed
		ready <- &testDaemon{t: t, d: d, sub: d.svc.Subscribe(1 << 16)}
	}}
	go func() { done <- serve(ctx, cfg, o, slog.New(slog.DiscardHandler)) }()
	var td *testDaemon
	select {
	case td = <-ready:
	case err := <-done:
		cancel()
		t.Fatalf("the daemon did not start: %v", err)
	case <-time.After(30 * time.Second):
		t.Fatal("the daemon did not start")
	}
	td.stop = func() {
		t.Helper()
		cancel()
		select {
		case err := <-done:
			if err != nil {
				t.Errorf("serve: %v", err)
			}
		case <-time.After(30 * time.Second):
			t.Fatal("the daemon did not stop")
		}
	}
	return td
}

// request waits for a finished request of kind (at f, if f is not 0) and returns its status. The
// timeout is a safety net: the virtual clock makes the daemon's work take milliseconds.
func (td *testDaemon) request(kind controller.Kind, f physic.Frequency) controller.RequestStatus {
	td.t.Helper()
	deadline := time.After(30 * time.Second)
	for {
		select {
		case ev := <-td.sub.Events():
			if ev.Kind != controller.EventRequest || !ev.Status.State.Final() {
				continue
			}
			st := *ev.Status
			if st.Request.Kind == kind && (f == 0 || st.Request.Freq == f) {
				return st
			}
		case <-deadline:
			td.t.Fatalf("no %s request at %v finished", kind, f)
		}
	}
}

// tuneEvent waits for a tuner event that match accepts.
func (td *testDaemon) tuneEvent(what string, match func(tune.Event) bool) tune.Event {
	td.t.Helper()
	deadline := time.After(30 * time.Second)
	for {
		select {
		case ev := <-td.sub.Events():
			if ev.Kind == controller.EventTune && match(*ev.Tune) {
				return *ev.Tune
			}
		case <-deadline:
			td.t.Fatalf("no event: %s", what)
			return tune.Event{}
		}
	}
}

func outcome(st controller.RequestStatus) tune.Outcome {
	if st.Result == nil {
		return ""
	}
	return st.Result.Outcome
}

// firstRFStage is where the daemon's first RF operation went from awaiting the carrier:
// straight to its search (the position trusted) or to re-referencing it from a dip.
func (td *testDaemon) firstRFStage() tune.State {
	e := td.tuneEvent("the first RF stage", func(e tune.Event) bool {
		return e.Kind == tune.KindState && e.From == tune.AwaitingCarrier
	})
	return e.State
}

const (
	demoFreq = 3750 * physic.KiloHertz // the simulated radio's frequency at first start
	newFreq  = 1850 * physic.KiloHertz
)

// The daemon on the simulator calibrates at its first start, follows a frequency set over the
// simulated radio's CAT pseudo-terminal, keeps what it learned, and finds it all again at the
// next start.
func TestDaemonFollowsTheRadio(t *testing.T) {
	state := t.TempDir()
	td := start(t, state, nil)
	if st := td.request(controller.Calibrate, demoFreq); outcome(st) != tune.Calibrated {
		t.Fatalf("first calibration: %s %v", outcome(st), st.Result)
	}
	f, err := os.OpenFile(td.d.backend.cat, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := f.WriteString("FA00001850000;"); err != nil {
		t.Fatal(err)
	}
	f.Close()
	if st := td.request(controller.Follow, newFreq); outcome(st) != tune.Tuned || st.Request.Source != controller.SourceRadio {
		t.Fatalf("following the radio to 1.85 MHz: %s from %s", outcome(st), st.Request.Source)
	}
	snap := td.d.svc.Snapshot()
	if snap.Busy || snap.Last == nil || snap.Last.Outcome != tune.Tuned || snap.Last.Freq != newFreq || snap.Last.SWR > 1.5 {
		t.Errorf("snapshot after the tune: busy %v, last %+v", snap.Busy, snap.Last)
	}
	td.stop()
	m, err := memmap.Load(filepath.Join(state, "loop.map"), memmap.Options{})
	if err != nil || m.Len() != 2 {
		t.Fatalf("memory map after the run: %v, %v; want two points", m, err)
	}
	if c, err := tune.LoadCalibration(filepath.Join(state, "backlash")); err != nil || c.Backlash != 40 {
		t.Fatalf("calibration after the run: %+v, %v; want the demo's 40 steps", c, err)
	}

	td = start(t, state, nil)
	if !td.d.svc.Tuner().Calibrated() {
		t.Error("the stored calibration was not installed")
	}
	p := td.tuneEvent("a prediction", func(e tune.Event) bool { return e.Kind == tune.KindPrediction })
	if p.Prediction.Source != memmap.SourceMap {
		t.Errorf("second start predicts from %q, want the map", p.Prediction.Source)
	}
	// (the simulated radio starts again on its configured frequency)
	if st := td.request(controller.Follow, demoFreq); outcome(st) != tune.Tuned {
		t.Errorf("second start: %s", outcome(st))
	}
	td.stop()
}

// A second daemon on the same state directory is refused, and told who holds it.
func TestSecondDaemonRefused(t *testing.T) {
	state := t.TempDir()
	td := start(t, state, nil)
	td.request(controller.Calibrate, demoFreq)
	cfg := defaultFile(true)
	cfg.State.Dir = state
	cfg.HTTP.Listen = "127.0.0.1:0"
	err := serve(context.Background(), cfg, options{virtual: true}, slog.New(slog.DiscardHandler))
	if err == nil || !strings.Contains(err.Error(), fmt.Sprintf("in use by process %d", os.Getpid())) {
		t.Errorf("second daemon: %v", err)
	}
	td.stop()
}

// A memory map damaged beyond repair (both copies) is set aside, never deleted, and the daemon
// starts with an empty map and says so in its snapshot.
func TestDamagedMapSetAsideAndStartsEmpty(t *testing.T) {
	state := t.TempDir()
	for _, name := range []string{"loop.map", "loop.map.prev"} {
		if err := os.WriteFile(filepath.Join(state, name), []byte("tankd-tunemap 1\nthis is not a map\n"), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	td := start(t, state, nil)
	if n := td.d.svc.Snapshot().Notices; len(n) == 0 || !strings.Contains(strings.Join(n, " "), "set aside") {
		t.Errorf("notices %q: want one saying the map was set aside", n)
	}
	if st := td.request(controller.Calibrate, demoFreq); outcome(st) != tune.Calibrated {
		t.Errorf("calibration on the empty map: %s", outcome(st))
	}
	td.stop()
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

// A clean stop leaves a marker with the motor's position: the next start trusts it and tunes
// from the learned point. Without the marker (a crash) the position is not trusted and is found
// again from the dip first.
func TestCleanStopMarker(t *testing.T) {
	state := t.TempDir()
	td := start(t, state, nil)
	td.request(controller.Calibrate, demoFreq)
	td.stop()
	if _, err := os.Stat(filepath.Join(state, "clean-stop")); err != nil {
		t.Fatalf("no clean-stop marker after a clean stop: %v", err)
	}
	td = start(t, state, nil)
	if got := td.firstRFStage(); got == tune.Referencing {
		t.Errorf("after a clean stop the first tune went %s", got)
	}
	if st := td.request(controller.Follow, demoFreq); outcome(st) != tune.Tuned {
		t.Errorf("after a clean stop: %s", outcome(st))
	}
	td.stop()

	// the marker is taken at start, so a run that ends without one looks like a crash
	if err := os.Remove(filepath.Join(state, "clean-stop")); err != nil {
		t.Fatal(err)
	}
	td = start(t, state, nil)
	if got := td.firstRFStage(); got != tune.Referencing {
		t.Errorf("after a crash the first tune went %s, want %s", got, tune.Referencing)
	}
	if st := td.request(controller.Follow, demoFreq); outcome(st) != tune.Tuned {
		t.Errorf("after a crash: %s", outcome(st))
	}
	td.stop()
}

// SIGHUP asks for a reset, as an operator would after a fault.
func TestSIGHUPResets(t *testing.T) {
	td := start(t, t.TempDir(), nil)
	td.request(controller.Calibrate, demoFreq)
	if err := syscall.Kill(os.Getpid(), syscall.SIGHUP); err != nil {
		t.Fatal(err)
	}
	if st := td.request(controller.Reset, 0); outcome(st) != tune.Reset || st.Request.Source != controller.SourceOperator {
		t.Errorf("reset: %s from %s", outcome(st), st.Request.Source)
	}
	td.stop()
}

// childEnv makes the test binary run the daemon on the wall clock, for TestKillNineDistrusts.
const childEnv = "TANKD_TEST_DAEMON_STATE"

// After a kill -9 in the middle of an operation the daemon starts with the position untrusted
// and finds it again from a dip before it tunes from the map; the state directory's lock died
// with the killed process.
func TestKillNineDistrusts(t *testing.T) {
	if dir := os.Getenv(childEnv); dir != "" {
		os.Exit(run([]string{"-state", dir, "-listen", "127.0.0.1:0"}, os.Stdout, os.Stdout))
	}
	state := t.TempDir()
	// a first, clean run: the map and the calibration, and a clean-stop marker
	td := start(t, state, nil)
	td.request(controller.Calibrate, demoFreq)
	td.stop()

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
	// On the wall clock the child's tune takes a while: kill it once it is under way. (Its
	// log is only the cue for the kill; nothing is asserted on it.)
	sc := bufio.NewScanner(out)
	underway := regexp.MustCompile(`msg=state component=tune to=positioning`)
	for sc.Scan() && !underway.MatchString(sc.Text()) {
	}
	if err := cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	_ = cmd.Wait()

	td = start(t, state, nil)
	if got := td.firstRFStage(); got != tune.Referencing {
		t.Errorf("after a kill -9 the first tune went %s, want %s", got, tune.Referencing)
	}
	if st := td.request(controller.Follow, demoFreq); outcome(st) != tune.Tuned {
		t.Errorf("after a kill -9: %s", outcome(st))
	}
	td.stop()
}

// The examples in configs/ are valid, and what -print-config prints, -config reads back
// unchanged.
func TestConfigExamplesAndPrintConfig(t *testing.T) {
	files, err := filepath.Glob("../../configs/tankd-*.toml")
	if err != nil || len(files) < 2 {
		t.Fatalf("example configurations: %v, %v", files, err)
	}
	for _, f := range append([]string{""}, files...) {
		c, err := loadConfig(f)
		if err != nil {
			t.Errorf("%s: %v", f, err)
			continue
		}
		var out, errOut bytes.Buffer
		args := []string{"-print-config"}
		if f != "" {
			args = append(args, "-config", f)
		}
		if code := run(args, &out, &errOut); code != 0 {
			t.Fatalf("%v: exit %d: %s", args, code, errOut.String())
		}
		printed := filepath.Join(t.TempDir(), "printed.toml")
		if err := os.WriteFile(printed, out.Bytes(), 0o600); err != nil {
			t.Fatal(err)
		}
		back, err := loadConfig(printed)
		if err != nil {
			t.Errorf("%s printed, read back: %v\n%s", f, err, out.String())
			continue
		}
		if !reflect.DeepEqual(back, c) {
			t.Errorf("%s: -print-config's output reads back differently", f)
		}
	}
}

// A configuration with unknown keys or bad values stops the daemon before it opens anything,
// with exit status 2 and every problem named.
func TestBadConfigurationExits2(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "bad.toml")
	if err := os.WriteFile(bad, []byte(`
[hardware]
backend = "sim"
[tuning]
target_swr = nan
settle = "-1s"
[radio]
dialect = "morse"
[station.loop]
turns = 0
[simulator.drive]
miss_rate = 2
`), 0o600); err != nil {
		t.Fatal(err)
	}
	var out, errOut bytes.Buffer
	if code := run([]string{"-config", bad, "-state", dir}, &out, &errOut); code != 2 {
		t.Fatalf("exit %d, want 2: %s", code, errOut.String())
	}
	for _, want := range []string{"tuning.target_swr: NaN", "tuning.settle: -1s", `radio.dialect: "morse"`,
		"station.loop.turns: 0", "simulator.drive.miss_rate: 2"} {
		if !strings.Contains(errOut.String(), want) {
			t.Errorf("missing %q in:\n%s", want, errOut.String())
		}
	}
	if entries, _ := os.ReadDir(dir); len(entries) != 1 {
		t.Errorf("the state directory was touched: %v", entries)
	}
	typo := filepath.Join(dir, "typo.toml")
	if err := os.WriteFile(typo, []byte("[tuning]\ntarget_swrr = 1.5\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	errOut.Reset()
	if code := run([]string{"-config", typo}, &out, &errOut); code != 2 || !strings.Contains(errOut.String(), "tuning.target_swrr") {
		t.Errorf("unknown key: exit %d: %s", code, errOut.String())
	}
	errOut.Reset()
	if code := run([]string{"-log-level", "loud", "-sim-clock", "sundial", "extra"}, &out, &errOut); code != 2 ||
		!strings.Contains(errOut.String(), "loud") || !strings.Contains(errOut.String(), "sundial") {
		t.Errorf("bad flags: exit %d: %s", code, errOut.String())
	}
}

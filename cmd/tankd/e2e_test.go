package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"runtime"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// The real tankd binary, end to end, on the simulator (its virtual clock) and a free loopback
// port: a frequency set through the API is followed to its request's result, the metrics and
// the event stream agree, a SIGTERM stops it cleanly and a restart finds the map and a trusted
// position; a SIGKILL leaves the position untrusted for the next start.
func TestBinaryEndToEnd(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and runs the daemon")
	}
	bin := filepath.Join(t.TempDir(), "tankd")
	if out, err := execBuild(bin); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	state := t.TempDir()

	// systemd's notification socket, as systemd would give it (Type=notify, WatchdogSec)
	sock := filepath.Join(t.TempDir(), "notify")
	conn, err := net.ListenUnixgram("unixgram", &net.UnixAddr{Name: sock, Net: "unixgram"})
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	notes := make(chan string, 64)
	go func() {
		buf := make([]byte, 512)
		for {
			n, _, err := conn.ReadFromUnix(buf)
			if err != nil {
				return
			}
			notes <- string(buf[:n])
		}
	}()
	p := startBinaryEnv(t, bin, []string{"NOTIFY_SOCKET=" + sock, "WATCHDOG_USEC=200000"},
		"-state", state, "-listen", "127.0.0.1:0", "-sim-clock", "virtual")
	// READY once it is up, then WATCHDOG pings at half the interval while the loop is healthy
	awaitNote(t, notes, "READY=1")
	awaitNote(t, notes, "WATCHDOG=1")
	// the first start calibrates at the simulated radio's frequency: let it finish
	var first requestJSON
	p.getJSON("/api/v1/requests/1?wait=20s", &first)
	if first.State != "done" || first.Result == nil || first.Result.Outcome != "calibrated" {
		t.Fatalf("the first start's calibration: %+v", first)
	}
	stream := p.events()
	var accepted struct {
		RequestID *uint64 `json:"request_id"`
	}
	p.postJSON("/api/v1/frequency", `{"hz": 3700000}`, http.StatusAccepted, &accepted)
	if accepted.RequestID == nil {
		t.Fatal("setting a new frequency submitted no request")
	}
	var done requestJSON
	p.getJSON(fmt.Sprintf("/api/v1/requests/%d?wait=20s", *accepted.RequestID), &done)
	if done.State != "done" || done.Result == nil || done.Result.Outcome != "tuned" || done.Result.SWR == nil || *done.Result.SWR > 1.5 {
		t.Fatalf("the tune at 3.7 MHz: %+v %+v", done, done.Result)
	}
	var st statusJSON
	p.getJSON("/api/v1/status", &st)
	if st.Busy || st.Outcome == nil || *st.Outcome != "tuned" || st.FrequencyHz == nil || *st.FrequencyHz != 3700000 ||
		st.SWR == nil || *st.SWR > 1.5 || st.MapPoints != 2 || !st.PositionTrusted {
		t.Errorf("status after the tune: %+v", st)
	}
	// The counters are counted from the event stream, a moment after the request is done: scrape
	// until they have caught up (the follower may have tuned at the radio's first frequency as
	// well: at least one tuned follow).
	tunedFollow := regexp.MustCompile(`(?m)^tankd_operations_total\{kind="follow",outcome="tuned"\} [1-9]`)
	metrics := p.get("/metrics")
	for deadline := time.Now().Add(10 * time.Second); !tunedFollow.MatchString(metrics); metrics = p.get("/metrics") {
		if time.Now().After(deadline) {
			t.Fatalf("metrics count no tuned follow:\n%s", metrics)
		}
		runtime.Gosched()
	}
	for _, want := range []string{
		`tankd_operations_total{kind="calibrate",outcome="calibrated"} 1`,
		"tankd_memory_map_points 2",
		"tankd_position_trusted 1",
		`tankd_tuner_state{state="idle"} 1`,
		"tankd_build_info{",
		"process_start_time_seconds",
	} {
		if !strings.Contains(metrics, want) {
			t.Errorf("metrics lack %q", want)
		}
	}
	// the event stream saw the tune's states in their order
	states := stream.statesOf(*accepted.RequestID, "idle")
	want := []string{"awaiting-carrier", "refining", "approaching", "verifying", "idle"}
	if !subsequence(states, want) {
		t.Errorf("the tune's states on the event stream: %v, want %v in order", states, want)
	}
	if code := p.stop(syscall.SIGTERM); code != 0 {
		t.Fatalf("SIGTERM: exit status %d", code)
	}
	awaitNote(t, notes, "STOPPING=1")
	firstLog := p.logText()

	p = startBinary(t, bin, state)
	p.getJSON("/api/v1/status", &st)
	if st.MapPoints != 2 || !st.PositionTrusted {
		t.Errorf("after a clean stop: %d map points, position trusted %v\n--- the first run:\n%s\n--- the second:\n%s", st.MapPoints, st.PositionTrusted, firstLog, p.logText())
	}
	if code := p.stop(syscall.SIGKILL); code != -1 {
		t.Errorf("SIGKILL: exit status %d", code)
	}
	// Without auto-tune nothing finds the position again by itself, so the status shows what
	// the start decided.
	quiet := filepath.Join(t.TempDir(), "quiet.toml")
	if err := os.WriteFile(quiet, []byte("[hardware]\nbackend = \"sim\"\n[tuning]\ntransmit = true\nauto_tune = false\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	p = startBinary(t, bin, state, "-config", quiet)
	p.getJSON("/api/v1/status", &st)
	if st.PositionTrusted {
		t.Error("after a SIGKILL the position is trusted")
	}
	if code := p.stop(syscall.SIGTERM); code != 0 {
		t.Errorf("SIGTERM: exit status %d", code)
	}
}

// awaitNote waits for a systemd notification (the timeout is a safety net).
func awaitNote(t *testing.T, notes <-chan string, want string) {
	t.Helper()
	deadline := time.After(30 * time.Second)
	for {
		select {
		case n := <-notes:
			if strings.Contains(n, want) {
				return
			}
		case <-deadline:
			t.Fatalf("no %q notification", want)
		}
	}
}

// subsequence says whether want appears in got in order (not necessarily adjacent).
func subsequence(got, want []string) bool {
	i := 0
	for _, g := range got {
		if i < len(want) && g == want[i] {
			i++
		}
	}
	return i == len(want)
}

type requestJSON struct {
	ID     uint64 `json:"id"`
	State  string `json:"state"`
	Result *struct {
		Outcome string   `json:"outcome"`
		SWR     *float64 `json:"swr"`
	} `json:"result"`
}

type statusJSON struct {
	Busy            bool     `json:"busy"`
	Outcome         *string  `json:"outcome"`
	FrequencyHz     *float64 `json:"frequency_hz"`
	SWR             *float64 `json:"swr"`
	MapPoints       int      `json:"map_points"`
	PositionTrusted bool     `json:"position_trusted"`
}

// process is a running tankd binary.
type process struct {
	t    *testing.T
	cmd  *exec.Cmd
	base string
	log  *bytes.Buffer
	mu   *sync.Mutex
	done chan struct{}
}

var apiAddr = regexp.MustCompile(`msg="HTTP API" listen=(\S+)`)

// execBuild builds the daemon from this package into bin.
func execBuild(bin string) ([]byte, error) {
	return exec.Command("go", "build", "-o", bin, ".").CombinedOutput()
}

// startBinary runs the daemon on state, on the virtual clock, and waits until it is ready.
func startBinary(t *testing.T, bin, state string, args ...string) *process {
	t.Helper()
	return startBinaryArgs(t, bin, append([]string{"-state", state, "-listen", "127.0.0.1:0", "-sim-clock", "virtual"}, args...)...)
}

// startBinaryArgs runs the daemon with args and waits until it is ready.
func startBinaryArgs(t *testing.T, bin string, args ...string) *process {
	t.Helper()
	return startBinaryEnv(t, bin, nil, args...)
}

// startBinaryEnv runs the daemon with args and env added to the environment, and waits until
// it is ready.
func startBinaryEnv(t *testing.T, bin string, env []string, args ...string) *process {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), env...)
	stderr, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	p := &process{t: t, cmd: cmd, log: &bytes.Buffer{}, mu: &sync.Mutex{}, done: make(chan struct{})}
	addr := make(chan string, 1)
	go func() {
		defer close(p.done)
		sc := bufio.NewScanner(stderr)
		for sc.Scan() {
			p.mu.Lock()
			p.log.WriteString(sc.Text() + "\n")
			p.mu.Unlock()
			if m := apiAddr.FindStringSubmatch(sc.Text()); m != nil {
				addr <- m[1]
			}
		}
	}()
	t.Cleanup(func() {
		if cmd.ProcessState == nil {
			_ = cmd.Process.Kill()
			_ = cmd.Wait()
		}
	})
	select {
	case a := <-addr:
		p.base = "http://" + a
	case <-time.After(30 * time.Second):
		t.Fatalf("the daemon never said where it listens:\n%s", p.logText())
	}
	// The daemon says where it listens once the hardware is up and the service runs: ready.
	resp, err := http.Get(p.base + "/readyz")
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		t.Fatalf("readyz: %d\n%s", resp.StatusCode, p.logText())
	}
	return p
}

func (p *process) logText() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.log.String()
}

// stop sends sig and returns the exit status (-1 for a death by signal).
func (p *process) stop(sig syscall.Signal) int {
	p.t.Helper()
	if err := p.cmd.Process.Signal(sig); err != nil {
		p.t.Fatal(err)
	}
	exited := make(chan struct{})
	go func() {
		_ = p.cmd.Wait()
		close(exited)
	}()
	select {
	case <-exited:
	case <-time.After(15 * time.Second): // the systemd unit's TimeoutStopSec
		p.t.Fatalf("the daemon did not stop within 15 s of %v:\n%s", sig, p.logText())
	}
	<-p.done
	return p.cmd.ProcessState.ExitCode()
}

func (p *process) get(path string) string {
	p.t.Helper()
	resp, err := http.Get(p.base + path)
	if err != nil {
		p.t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil || resp.StatusCode != http.StatusOK {
		p.t.Fatalf("GET %s: %d %v\n%s", path, resp.StatusCode, err, b)
	}
	return string(b)
}

func (p *process) getJSON(path string, v any) {
	p.t.Helper()
	if err := json.Unmarshal([]byte(p.get(path)), v); err != nil {
		p.t.Fatalf("GET %s: %v", path, err)
	}
}

func (p *process) postJSON(path, body string, code int, v any) {
	p.t.Helper()
	resp, err := http.Post(p.base+path, "application/json", strings.NewReader(body))
	if err != nil {
		p.t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	if resp.StatusCode != code {
		p.t.Fatalf("POST %s: %d, want %d\n%s", path, resp.StatusCode, code, b)
	}
	if err := json.Unmarshal(b, v); err != nil {
		p.t.Fatalf("POST %s: %v\n%s", path, err, b)
	}
}

// sse is an open event stream, read in the background.
type sse struct {
	t      *testing.T
	events chan sseEvent
}

type sseEvent struct {
	name string
	data string
}

func (p *process) events() *sse {
	p.t.Helper()
	resp, err := http.Get(p.base + "/api/v1/events")
	if err != nil {
		p.t.Fatal(err)
	}
	if resp.StatusCode != http.StatusOK || !strings.HasPrefix(resp.Header.Get("Content-Type"), "text/event-stream") {
		p.t.Fatalf("events: %d %s", resp.StatusCode, resp.Header.Get("Content-Type"))
	}
	s := &sse{t: p.t, events: make(chan sseEvent, 1<<16)}
	p.t.Cleanup(func() { resp.Body.Close() })
	go func() {
		defer close(s.events)
		sc := bufio.NewScanner(resp.Body)
		sc.Buffer(make([]byte, 1<<20), 1<<20)
		var ev sseEvent
		for sc.Scan() {
			line := sc.Text()
			switch {
			case strings.HasPrefix(line, "event: "):
				ev.name = strings.TrimPrefix(line, "event: ")
			case strings.HasPrefix(line, "data: "):
				ev.data = strings.TrimPrefix(line, "data: ")
			case line == "":
				if ev.name != "" {
					s.events <- ev
				}
				ev = sseEvent{}
			}
		}
	}()
	return s
}

// statesOf collects the tuner's states of request id from the stream until last.
func (s *sse) statesOf(id uint64, last string) []string {
	s.t.Helper()
	var states []string
	deadline := time.After(30 * time.Second)
	for {
		select {
		case ev, ok := <-s.events:
			if !ok {
				s.t.Fatalf("the event stream ended; states so far %v", states)
			}
			if ev.name != "state" {
				continue
			}
			var e struct {
				State     string  `json:"state"`
				RequestID *uint64 `json:"request_id"`
			}
			if err := json.Unmarshal([]byte(ev.data), &e); err != nil {
				s.t.Fatalf("state event %q: %v", ev.data, err)
			}
			if e.RequestID == nil || *e.RequestID != id {
				continue
			}
			states = append(states, e.State)
			if e.State == last {
				return states
			}
		case <-deadline:
			s.t.Fatalf("no %q state of request %d on the event stream; states so far %v", last, id, states)
		}
	}
}

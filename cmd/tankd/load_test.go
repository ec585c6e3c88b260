package main

import (
	"bufio"
	"context"
	"flag"
	"fmt"
	"net/http"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"
)

var loadTest = flag.Bool("load", false, "run the HTTP load test: 50 event-stream clients and 200 status reads a second against the daemon on the wall clock for 10 s, while it tunes")

// TestLoad measures the daemon under the load of a busy shack: 50 clients on the event stream
// and 200 status reads a second, for 10 s on loopback, while it tunes the simulated loop in real
// time. It reports the tunes' durations and carrier time with and without the load, and the
// status reads' latency. It is a measurement, not part of the normal suite:
//
//	go test ./cmd/tankd -run TestLoad -load -v
func TestLoad(t *testing.T) {
	if !*loadTest {
		t.Skip("a 30 s measurement on the wall clock: run with -load")
	}
	bin := filepath.Join(t.TempDir(), "tankd")
	if out, err := execBuild(bin); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	// the wall clock: the tuner's timing is real, so that load would show in it
	p := startBinaryArgs(t, bin, "-state", t.TempDir(), "-listen", "127.0.0.1:0")
	var first requestJSON
	p.getJSON("/api/v1/requests/1?wait=20s", &first)
	if first.State != "done" {
		t.Fatalf("the first calibration: %+v", first)
	}
	freqs := []int{3600000, 3700000, 3650000, 3750000}
	baseline := p.tunes(freqs)

	ctx, cancel := context.WithCancel(context.Background())
	var wg sync.WaitGroup
	var sseEvents [50]atomic.Int64
	for i := range sseEvents {
		wg.Add(1)
		go func() {
			defer wg.Done()
			req, _ := http.NewRequestWithContext(ctx, http.MethodGet, p.base+"/api/v1/events", nil)
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				return
			}
			defer resp.Body.Close()
			sc := bufio.NewScanner(resp.Body)
			sc.Buffer(make([]byte, 1<<20), 1<<20)
			for sc.Scan() {
				if strings.HasPrefix(sc.Text(), "event: ") {
					sseEvents[i].Add(1)
				}
			}
		}()
	}
	var mu sync.Mutex
	var lat []time.Duration
	var failed atomic.Int64
	wg.Add(1)
	go func() {
		defer wg.Done()
		tick := time.NewTicker(5 * time.Millisecond) // 200 a second
		defer tick.Stop()
		for {
			select {
			case <-ctx.Done():
				return
			case <-tick.C:
				go func() {
					t0 := time.Now()
					resp, err := http.Get(p.base + "/api/v1/status")
					if err != nil || resp.StatusCode != http.StatusOK {
						failed.Add(1)
						if err == nil {
							resp.Body.Close()
						}
						return
					}
					resp.Body.Close()
					mu.Lock()
					lat = append(lat, time.Since(t0))
					mu.Unlock()
				}()
			}
		}
	}()
	began := time.Now()
	var loaded []tuneTime
	for time.Since(began) < 10*time.Second {
		loaded = append(loaded, p.tunes(freqs)...)
	}
	elapsed := time.Since(began)
	cancel()
	wg.Wait()
	p.stop(syscall.SIGTERM)

	mu.Lock()
	slices.Sort(lat)
	mu.Unlock()
	minEv, maxEv := int64(1<<62), int64(0)
	for i := range sseEvents {
		minEv, maxEv = min(minEv, sseEvents[i].Load()), max(maxEv, sseEvents[i].Load())
	}
	t.Logf("status reads: %d in %v (%.0f/s), %d failed; latency p50 %v, p99 %v, max %v",
		len(lat), elapsed.Round(time.Millisecond), float64(len(lat))/elapsed.Seconds(), failed.Load(),
		quantileDur(lat, 0.5), quantileDur(lat, 0.99), quantileDur(lat, 1))
	t.Logf("event streams: 50 clients, %d to %d events each", minEv, maxEv)
	t.Logf("tunes without load: %s", summary(baseline))
	t.Logf("tunes under load:   %s", summary(loaded))
	if failed.Load() > 0 || minEv == 0 {
		t.Errorf("%d status reads failed; the quietest event stream saw %d events", failed.Load(), minEv)
	}
}

type tuneTime struct{ took, rf float64 }

// tunes sets each frequency in turn through the API (the simulated radio's VFO follows, and the
// loop is tuned there) and returns how long each tune took and its carrier time, by the daemon's
// own clock.
func (p *process) tunes(freqs []int) []tuneTime {
	p.t.Helper()
	var out []tuneTime
	for _, f := range freqs {
		var acc struct {
			RequestID *uint64 `json:"request_id"`
		}
		p.postJSON("/api/v1/frequency", fmt.Sprintf(`{"hz": %d}`, f), http.StatusAccepted, &acc)
		if acc.RequestID == nil {
			p.t.Fatalf("setting %d Hz submitted no request", f)
		}
		var r struct {
			State  string `json:"state"`
			Result *struct {
				Outcome   string  `json:"outcome"`
				DurationS float64 `json:"duration_s"`
				RFTimeS   float64 `json:"rf_time_s"`
			} `json:"result"`
		}
		p.getJSON(fmt.Sprintf("/api/v1/requests/%d?wait=20s", *acc.RequestID), &r)
		if r.Result == nil || r.Result.Outcome != "tuned" {
			p.t.Fatalf("tune at %d Hz: %+v %+v", f, r, r.Result)
		}
		out = append(out, tuneTime{r.Result.DurationS, r.Result.RFTimeS})
	}
	return out
}

func summary(ts []tuneTime) string {
	var took, rf []float64
	for _, x := range ts {
		took, rf = append(took, x.took), append(rf, x.rf)
	}
	slices.Sort(took)
	slices.Sort(rf)
	return fmt.Sprintf("%d tunes, median %.3f s (max %.3f s), median RF %.3f s (max %.3f s)",
		len(ts), took[len(took)/2], took[len(took)-1], rf[len(rf)/2], rf[len(rf)-1])
}

func quantileDur(d []time.Duration, q float64) time.Duration {
	if len(d) == 0 {
		return 0
	}
	return d[min(len(d)-1, int(q*float64(len(d))))].Round(10 * time.Microsecond)
}

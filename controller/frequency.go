package controller

import (
	"fmt"
	"time"

	"periph.io/x/conn/v3/physic"
)

// Settled reports that the radio is on f and will stay there, as a client that set the
// frequency says (an operator who typed it, an API call): unlike Update, which waits for a
// turning knob to come to rest, the follower decides at once. If f needs a request (it lies
// outside the tuned window and outside that of every request on its way, and is not a
// frequency the follower's last request already failed at), a Follow is submitted now and its ID
// returned; otherwise the ID is 0 and nothing is submitted. The follower goes on following f as
// if Update had reported it, so a later report of the same frequency by the radio changes
// nothing.
func (fl *Follower) Settled(f physic.Frequency, from Source) (RequestID, error) {
	if f <= 0 {
		return 0, fmt.Errorf("follower: settled at %v: want more than 0", f)
	}
	if !from.valid() {
		return 0, fmt.Errorf("follower: settled: source %q: want api, radio, operator or schedule", from)
	}
	fl.mu.Lock()
	defer fl.mu.Unlock()
	defer fl.kickLocked()
	now := fl.clk.Now()
	fl.heard, fl.from = now, from
	if f != fl.freq {
		fl.freq, fl.changed = f, now
	}
	fl.heardLocked(now)
	fl.due = time.Time{}
	if fl.covered(f, Follow) {
		return 0, nil
	}
	id, err := fl.s.Submit(Request{Kind: Follow, Source: from, Freq: f})
	if err != nil {
		return 0, fmt.Errorf("follower: %w", err)
	}
	fl.mine = id
	fl.log.Info("following a frequency set by a client", "freq", f, "id", id, "source", from)
	return id, nil
}

package controller

import (
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/band"
	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/tune"
)

// FollowOptions are the follower's policy. Zero values take the defaults given.
type FollowOptions struct {
	// RetuneFraction: a frequency within RetuneFraction × the loop's loaded bandwidth of where
	// the loop was tuned (or is being tuned) needs nothing. Default 0.25 (from memory: a loop
	// detuned by a quarter of its bandwidth shows an SWR of about 2.6 on a matched feed, about
	// where an operator would want it tuned again). The bandwidth is the last fit's, or the
	// memory map's prediction.
	RetuneFraction float64
	// Settle is how long the frequency must stay put, outside the tuned window, before the
	// follower submits a Follow: a turning VFO knob reports many frequencies in a row, and only
	// where it stops matters. Every further change restarts it. Default 0.5 s (from memory).
	Settle time.Duration
	// StaleAfter: a source that has said nothing for this long is marked stale in the
	// snapshot (its frequency may no longer be the radio's). Default 10 s (from memory); a
	// negative value: never (a source that only speaks on a change, as the simulated radio).
	StaleAfter time.Duration
	// Manual: the service does not drive the follower's timers; its caller calls Poll when the
	// time Poll last returned has come. For tests that move a virtual clock by hand.
	Manual bool
	Logger *slog.Logger
}

func (o *FollowOptions) defaults() {
	if o.RetuneFraction == 0 {
		o.RetuneFraction = 0.25
	}
	if o.Settle == 0 {
		o.Settle = 500 * time.Millisecond
	}
	if o.StaleAfter == 0 {
		o.StaleAfter = 10 * time.Second
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
}

func (o FollowOptions) validate() error {
	var errs []error
	if !(o.RetuneFraction > 0 && o.RetuneFraction <= 10) {
		errs = append(errs, fmt.Errorf("retune fraction %g: want more than 0, up to 10", o.RetuneFraction))
	}
	if o.Settle < 0 || o.Settle > time.Minute {
		errs = append(errs, fmt.Errorf("settle %v: want 0 to 1 min", o.Settle))
	}
	return errors.Join(errs...)
}

// Follower keeps the loop on the radio's frequency. Sources of the frequency (the simulated
// radio, a CAT client, the API) call Update with every frequency they learn and Alive when they
// have heard from the radio without a change; the follower decides when to submit a request:
//
//   - A frequency within the tuned window — RetuneFraction × the loaded bandwidth — of where the
//     loop was last tuned, or of a request on its way (waiting or running), needs nothing. This
//     is also how the tuner's own carrier is told from an operator's change: while the tuner
//     transmits on the frequency it tunes, reports of that frequency fall in the running
//     request's window.
//   - A frequency in another band than the last one (or the first one heard) pre-positions the
//     loop at once (a Preposition: no RF), since the old position is useless there.
//   - Otherwise, once the frequency has stayed put for Settle, the follower submits a Follow
//     (pre-position, and an RF tune when the service's AutoTune is on). A change during the
//     tuner's RF stages ends the tune by itself (the tuner's guard watches the radio); the
//     follower then submits the new frequency like any other.
//   - A request of the follower's that ended because the radio moved (frequency-changed,
//     off-frequency) is followed up once a source has reported the new frequency and it has
//     settled; one that ended otherwise (a failure, an operator's stop) is not repeated until
//     the frequency leaves its window, so a frequency the loop cannot tune never keys the
//     carrier again and again.
//   - A source that says nothing for StaleAfter is marked stale in the snapshot.
//
// The service's Run drives the follower's timers, between operations, on the service's own
// goroutine: the one that sleeps on the clock, so that on a virtual clock the follower's waits
// never move time under an operation. A deadline that comes due during an operation is acted on
// when it ends (a change during the RF stages ends the tune anyway). Update, Alive, Poll and
// Status may be called from any goroutine.
type Follower struct {
	s   *Service
	clk clock.Clock
	o   FollowOptions
	log *slog.Logger

	mu      sync.Mutex
	freq    physic.Frequency // the radio's frequency as last reported; 0: never
	from    Source
	heard   time.Time // when a source last said anything
	changed time.Time // when the frequency last changed
	stale   bool
	due     time.Time // when a Follow is due, if the frequency stays put; zero: none
	mine    RequestID // the follower's latest request
}

// NewFollower returns a follower submitting to s, on s's clock, driven by s's Run unless
// o.Manual.
func NewFollower(s *Service, o FollowOptions) (*Follower, error) {
	o.defaults()
	if err := o.validate(); err != nil {
		return nil, fmt.Errorf("follower options: %w", err)
	}
	fl := &Follower{s: s, clk: s.d.Clock, o: o, log: o.Logger.With("component", "follower")}
	if !o.Manual {
		s.addFollower(fl)
	}
	return fl, nil
}

// FollowStatus is the follower's state, for status pages and tests.
type FollowStatus struct {
	Freq   physic.Frequency
	Source Source
	Heard  time.Time
	Stale  bool
	// Due is when a Follow will be submitted if the frequency stays put; zero if none is due.
	Due time.Time
	// Submitted is the follower's latest request (0: none yet).
	Submitted RequestID
}

// Status returns the follower's state.
func (fl *Follower) Status() FollowStatus {
	fl.mu.Lock()
	defer fl.mu.Unlock()
	return FollowStatus{Freq: fl.freq, Source: fl.from, Heard: fl.heard, Stale: fl.stale, Due: fl.due, Submitted: fl.mine}
}

// Update reports that the radio is on f, as source from says. A frequency of 0 (unknown) only
// says the source is alive.
func (fl *Follower) Update(f physic.Frequency, from Source) {
	fl.mu.Lock()
	defer fl.mu.Unlock()
	now := fl.clk.Now()
	fl.heard, fl.from = now, from
	if f <= 0 || f == fl.freq {
		fl.heardLocked(now)
		fl.evaluateLocked(now)
		fl.kickLocked()
		return
	}
	prev := fl.freq
	fl.freq, fl.changed = f, now
	fl.heardLocked(now)
	if fl.newBand(prev, f) && !fl.covered(f, Preposition) {
		// The old position is of no use on another band: go at once, with no RF, before the
		// operator has settled on a frequency.
		fl.submitLocked(Preposition, f, "band change")
	}
	fl.evaluateLocked(now)
	fl.kickLocked()
}

// Alive reports that the source from has heard the radio, with no change of frequency.
func (fl *Follower) Alive(from Source) {
	fl.mu.Lock()
	defer fl.mu.Unlock()
	now := fl.clk.Now()
	fl.heard, fl.from = now, from
	fl.heardLocked(now)
	fl.evaluateLocked(now)
	fl.kickLocked()
}

// heardLocked clears staleness and tells the service what the source says.
func (fl *Follower) heardLocked(now time.Time) {
	fl.stale = false
	fl.s.noteRadio(RadioStatus{Freq: fl.freq, Source: fl.from, Heard: now})
}

// Poll applies the policy at the clock's now: a Follow that has come due is submitted, a
// silent source is marked stale. It returns when it next has something to do (zero: nothing
// until the next Update or Alive, or a request's end).
func (fl *Follower) Poll() time.Time {
	fl.mu.Lock()
	defer fl.mu.Unlock()
	now := fl.clk.Now()
	fl.evaluateLocked(now)
	next := fl.due
	if fl.o.StaleAfter > 0 && !fl.heard.IsZero() {
		staleAt := fl.heard.Add(fl.o.StaleAfter)
		switch {
		case !now.Before(staleAt):
			if !fl.stale {
				fl.stale = true
				fl.log.Warn("frequency source silent: the radio's frequency is stale", "source", fl.from, "heard", fl.heard)
				fl.s.noteRadio(RadioStatus{Freq: fl.freq, Source: fl.from, Heard: fl.heard, Stale: true})
			}
		case next.IsZero() || staleAt.Before(next):
			next = staleAt
		}
	}
	return next
}

// evaluateLocked decides whether the radio's frequency needs a Follow, and submits one once the
// frequency has settled.
func (fl *Follower) evaluateLocked(now time.Time) {
	if fl.freq <= 0 || fl.covered(fl.freq, Follow) {
		fl.due = time.Time{}
		return
	}
	due := fl.changed.Add(fl.o.Settle)
	if now.Before(due) {
		fl.due = due
		return
	}
	fl.due = time.Time{}
	fl.submitLocked(Follow, fl.freq, "frequency settled")
}

// submitLocked submits a request of kind k at f for the follower.
func (fl *Follower) submitLocked(k Kind, f physic.Frequency, why string) {
	id, err := fl.s.Submit(Request{Kind: k, Source: fl.source(), Freq: f})
	if err != nil {
		fl.log.Warn("frequency not followed", "freq", f, "kind", k, "err", err)
		return
	}
	fl.mine = id
	fl.log.Info("following the radio", "freq", f, "kind", k, "id", id, "why", why)
}

// source is the source the follower's requests are booked to: the frequency's.
func (fl *Follower) source() Source {
	if fl.from.valid() {
		return fl.from
	}
	return SourceRadio
}

// newBand says whether f is on another amateur band than prev (or prev is the first report).
func (fl *Follower) newBand(prev, f physic.Frequency) bool {
	nb, ok := band.Of(f)
	if !ok {
		return false
	}
	pb, ok := band.Of(prev)
	return !ok || pb.Name != nb.Name
}

// covered says whether f needs no request of kind k: it lies in the window of a request on
// its way (waiting or running) that does what k does, of the last operation if it left the loop
// so, or of the follower's own last attempt if that must not be repeated.
func (fl *Follower) covered(f physic.Frequency, k Kind) bool {
	snap := fl.s.Snapshot()
	within := func(g physic.Frequency, bw float64) bool {
		if g <= 0 {
			return false
		}
		return math.Abs(float64(f-g))/float64(physic.Hertz) <= fl.o.RetuneFraction*bw
	}
	does := func(r Request) bool { return r.Kind.hasFreq() && fl.satisfies(r.Kind, k) }
	if r := snap.Running; r != nil && does(r.Request) && within(r.Request.Freq, fl.s.predictedBandwidth(r.Request.Freq)) {
		return true
	}
	for _, q := range snap.Queue {
		if does(q.Request) && within(q.Request.Freq, fl.s.predictedBandwidth(q.Request.Freq)) {
			return true
		}
	}
	if r := snap.Last; r != nil && fl.left(r.Outcome, k) && within(r.Freq, fl.bandwidth(r)) {
		return true
	}
	if fl.mine != 0 {
		st, ok := fl.s.Request(fl.mine)
		if ok && st.State.Final() && fl.satisfies(st.Request.Kind, k) && within(st.Request.Freq, fl.bandwidthOf(st)) &&
			!(retry(st) && fl.changed.After(st.Submitted)) {
			// Only a request that ended because the radio moved, with the move reported
			// since it was asked for, is followed up: the same frequency again would fail
			// the same way.
			return true
		}
	}
	return false
}

// satisfies says whether a request of kind got does what one of kind want would: a Follow
// wants an RF tune when AutoTune is on, which a pre-position does not give.
func (fl *Follower) satisfies(got, want Kind) bool {
	if !got.hasFreq() {
		return false
	}
	if want == Preposition || !fl.s.o.AutoTune {
		return true
	}
	return got != Preposition
}

// left says whether an operation that ended with o left the loop as a request of kind want
// would.
func (fl *Follower) left(o tune.Outcome, want Kind) bool {
	switch o {
	case tune.Tuned, tune.Calibrated:
		return true
	case tune.Positioned:
		return want == Preposition || !fl.s.o.AutoTune
	}
	return false
}

// retry says whether the follower's request st ended because the radio moved under it: then the
// new frequency is followed as any other.
func retry(st RequestStatus) bool {
	if st.Result == nil {
		return false
	}
	return st.Result.Outcome == tune.FrequencyChanged || st.Result.Outcome == tune.OffFrequency
}

// bandwidth is the loaded bandwidth a result measured, or the one predicted for its frequency.
func (fl *Follower) bandwidth(r *tune.Result) float64 {
	if r.Fit != nil && r.Fit.Bandwidth > 0 {
		return r.Fit.Bandwidth
	}
	if r.Prediction != nil && r.Prediction.Q > 0 {
		return float64(r.Freq) / float64(physic.Hertz) / r.Prediction.Q
	}
	return fl.s.predictedBandwidth(r.Freq)
}

func (fl *Follower) bandwidthOf(st RequestStatus) float64 {
	if st.Result != nil && st.Result.Freq == st.Request.Freq {
		return fl.bandwidth(st.Result)
	}
	return fl.s.predictedBandwidth(st.Request.Freq)
}

// kickLocked has the service's loop look at the follower's deadlines again.
func (fl *Follower) kickLocked() {
	if !fl.o.Manual {
		fl.s.kick()
	}
}

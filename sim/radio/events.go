package radio

// Change says which parts of the radio's state an event reports on.
type Change uint16

// The parts of the state that change.
const (
	ChangedFreqA  Change = 1 << iota // frequency of VFO A
	ChangedFreqB                     // frequency of VFO B
	ChangedVFO                       // which VFO is in use
	ChangedMode                      // operating mode
	ChangedPower                     // output power setting
	ChangedTX                        // transmitting or not, tune carrier and its power
	ChangedSwitch                    // switched on or off
)

// Has reports whether c includes all of x.
func (c Change) Has(x Change) bool { return c&x == x && x != 0 }

func diff(a, b State) Change {
	var c Change
	if a.FreqA != b.FreqA {
		c |= ChangedFreqA
	}
	if a.FreqB != b.FreqB {
		c |= ChangedFreqB
	}
	if a.VFO != b.VFO {
		c |= ChangedVFO
	}
	if a.Mode != b.Mode {
		c |= ChangedMode
	}
	if a.Power != b.Power {
		c |= ChangedPower
	}
	if a.TX != b.TX || a.Tune != b.Tune || a.TunePower != b.TunePower {
		c |= ChangedTX
	}
	if a.On != b.On {
		c |= ChangedSwitch
	}
	return c
}

// Event reports a change of the radio's state: what changed, and the whole state just after.
type Event struct {
	Changed Change
	State   State
	origin  uint64 // who caused it: 0 for the front panel, else a CAT session
}

// Subscription delivers the radio's events to one subscriber. The radio never waits for a
// subscriber: when the buffer is full, the oldest event is dropped to make room, so a slow
// subscriber sees the latest state but may miss intermediate ones.
type Subscription struct {
	r       *Radio
	ch      chan Event
	dropped uint64 // guarded by r.mu
	closed  bool   // guarded by r.mu
}

// Subscribe starts delivering events into a buffer of depth events (16 if depth < 1). The
// caller must Close the subscription when done.
func (r *Radio) Subscribe(depth int) *Subscription {
	if depth < 1 {
		depth = 16
	}
	s := &Subscription{r: r, ch: make(chan Event, depth)}
	r.mu.Lock()
	r.subs[s] = struct{}{}
	r.mu.Unlock()
	return s
}

// Events returns the channel the events arrive on. It is closed by Close.
func (s *Subscription) Events() <-chan Event { return s.ch }

// Dropped returns how many events were dropped because the buffer was full.
func (s *Subscription) Dropped() uint64 {
	s.r.mu.Lock()
	defer s.r.mu.Unlock()
	return s.dropped
}

// Close stops delivery and closes the Events channel; events already buffered can still be
// read. Closing twice does nothing.
func (s *Subscription) Close() {
	s.r.mu.Lock()
	defer s.r.mu.Unlock()
	if s.closed {
		return
	}
	s.closed = true
	delete(s.r.subs, s)
	close(s.ch)
}

// deliver queues ev, dropping the oldest queued event if the buffer is full. Called with r.mu
// held; the subscriber may be reading concurrently, hence the non-blocking selects.
func (s *Subscription) deliver(ev Event) {
	for {
		select {
		case s.ch <- ev:
			return
		default:
		}
		select {
		case <-s.ch:
			s.dropped++
		default:
		}
	}
}

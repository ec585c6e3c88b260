package tune

import (
	"context"
	"fmt"
	"math"
	"slices"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
)

// carrierOn makes sure there is a carrier for the RF stages, with the motor where it stands:
// startRF, then awaitCarrier.
func (p *op) carrierOn() error {
	if err := p.startRF(); err != nil {
		return err
	}
	return p.awaitCarrier()
}

// startRF begins the RF stages: it checks that the radio is on the frequency being tuned and
// keys the transmitter when allowed (an operator's carrier is awaited instead). From here until
// carrierOff the guard watches the radio's frequency and counts the carrier time.
func (p *op) startRF() error {
	if err := p.armRF(); err != nil {
		return err
	}
	return p.key()
}

// armRF begins the RF stages without keying yet: the first reading keys (ensureCarrier), or the
// sweep that begins with its own run-up keys on the way (sweepRead).
func (p *op) armRF() error {
	t := p.t
	if err := p.to(AwaitingCarrier); err != nil {
		return err
	}
	// Never key on a frequency other than the one being tuned: the dip found would be the
	// wrong one, and the carrier somewhere it was not asked for.
	if got, ok := t.radioFrequency(); ok && absFreq(got-p.res.Freq) > t.par.rf.offFrequency {
		return fmt.Errorf("%w: the radio is on %v, the tune is for %v", ErrOffFrequency, got, p.res.Freq)
	}
	p.g.arm()
	if err := p.check(); err != nil {
		return err
	}
	if t.o.Transmit && !p.keyed {
		p.dropped = true // (keyed before the first reading)
	}
	return nil
}

// key keys the tune carrier, if the tuner may and has not. The unkey is owed from the attempt on
// (the radio may have keyed before its link failed to say so), and the carrier time counts from
// it: the key-up time that follows is carrier time too.
func (p *op) key() error {
	t := p.t
	if !t.o.Transmit || p.keyed {
		return nil
	}
	if err := p.check(); err != nil {
		return err // (the radio may have moved while the carrier was down)
	}
	again := p.hasKeyed
	if got, ok := t.radioFrequency(); ok && again && got != p.keyFreq {
		// Keying again is keying anew: only exactly where the carrier was, although a move
		// within rfParams.offFrequency would not have ended the tune with the carrier on.
		return fmt.Errorf("%w: the radio went from %v to %v while the carrier was down", ErrFrequencyChanged, p.keyFreq, got)
	} else if ok && !again {
		p.keyFreq = got
	}
	p.hasKeyed = true
	p.keyed, p.dropped, p.keyUpSeen = true, false, false
	p.keyedAt = t.d.Clock.Now()
	p.g.rfOn(p.keyedAt)
	if err := t.d.Transmitter.Key(p.ctx, t.o.TunePower); err != nil {
		if again {
			// the carrier the tune had cannot be had again: as if it had gone on the air
			return fmt.Errorf("%w: it could not be keyed again: %w", ErrCarrierLost, err)
		}
		return fmt.Errorf("key the tune carrier: %w", err)
	}
	return nil
}

// awaitCarrier waits for forward power, checking the coupler, up to Options.CarrierWait. After
// the tuner's own key it reads on at once (the carrier comes a key-up time after the key) and
// measures that key-up time, which times the next keys; an operator's carrier is polled for.
// A carrier that does not come back after a key in the middle of a tune was lost.
func (p *op) awaitCarrier() error {
	t := p.t
	own := t.o.Transmit && p.keyed
	until := t.d.Clock.Now().Add(t.o.CarrierWait)
	waited := false
	for {
		if err := p.check(); err != nil {
			return err
		}
		began := t.d.Clock.Now()
		r, err := t.d.Sensor.Read(p.ctx)
		if err != nil {
			return fmt.Errorf("read the coupler: %w", err)
		}
		p.res.Readings++
		if r.Forward > t.o.MaxForward {
			return fmt.Errorf("%w: %v", ErrOverPower, r.Forward)
		}
		if r.Forward >= t.o.MinForward {
			if own && !p.keyUpSeen {
				p.keyUpSeen = true
				// Exact when the carrier came between two readings; an upper bound when it was
				// there at the first, which is only taken if nothing better is known.
				if up := r.At.Sub(p.keyedAt); waited || t.keyUp == 0 {
					t.keyUp = max(up, time.Nanosecond)
				}
			}
			p.lost = 0
			p.g.rfOn(r.At) // an operator's carrier counts from its first reading
			if st := t.d.Axis.Snapshot(); !st.Moving {
				p.spare = &spareReading{r: r, pos: st.Position}
			}
			return p.check()
		}
		waited = true
		if !t.d.Clock.Now().Before(until) {
			if p.keyedTwice {
				return fmt.Errorf("%w: no forward power within %v of the key (forward %v, need %v)", ErrCarrierLost, t.o.CarrierWait, r.Forward, t.o.MinForward)
			}
			return fmt.Errorf("%w within %v (forward %v, need %v)", ErrNoCarrier, t.o.CarrierWait, r.Forward, t.o.MinForward)
		}
		pause := t.par.rf.carrierPoll
		if own {
			// read on: only pace a converter that takes no time
			pause = t.par.rf.keyPoll - t.d.Clock.Now().Sub(began)
		}
		if err := t.d.Clock.Sleep(p.ctx, pause); err != nil {
			return err
		}
	}
}

// spareReading is the reading that found the carrier, kept for the next reading the operation
// takes if the motor has not moved since: it is as good as one taken then.
type spareReading struct {
	r   sense.Reading
	pos motion.Steps
}

// keyLead is how long before the carrier is needed the tuner keys: the key-up time it measured
// (nothing until it has measured one: the first key is made where the carrier is needed, and
// timed).
func (t *Tuner) keyLead() time.Duration { return t.keyUp }

// dropCarrier unkeys in the middle of the RF stages, for a move that needs no reading: the
// carrier time stops counting, the radio's frequency is still watched, and the next reading
// keys again (ensureCarrier). It does nothing with an operator's carrier, which the tuner does
// not control.
func (p *op) dropCarrier() error {
	if !p.keyed {
		return nil
	}
	p.g.rfPause(p.t.d.Clock.Now())
	if err := p.unkey(); err != nil {
		return err
	}
	p.dropped = true
	return nil
}

// rekey keys again after dropCarrier (or for the first time after armRF), at once;
// awaitCarrier then waits for the carrier.
func (p *op) rekey() error {
	if !p.dropped {
		return nil
	}
	p.keyedTwice = p.hasKeyed
	return p.key()
}

// ensureCarrier makes sure the carrier is there for a reading: keyed again if it was dropped,
// and waited for if it has not been seen since the key.
func (p *op) ensureCarrier() error {
	if p.dropped {
		if err := p.rekey(); err != nil {
			return err
		}
	}
	if p.keyed && !p.keyUpSeen {
		return p.awaitCarrier()
	}
	return nil
}

func absFreq(f physic.Frequency) physic.Frequency {
	if f < 0 {
		return -f
	}
	return f
}

// carrierOff ends the RF stages: it drops the tune carrier if the tuner keyed (or tried to key)
// it, and books the RF time. It runs however the operation ends, so it does not honour
// cancellation.
func (p *op) carrierOff() error {
	p.res.RFTime = p.g.rfOff(p.t.d.Clock.Now())
	p.dropped = false
	return p.unkey()
}

// unkey drops the tune carrier if a key is owed. An unkey that fails is retried; if every
// attempt fails the carrier may still be on, and the tuner latches a fault that withdraws its
// permission to transmit until a reset manages to unkey.
func (p *op) unkey() error {
	t := p.t
	if !p.keyed {
		return nil
	}
	quiet := context.WithoutCancel(p.ctx)
	k := &t.par.rf
	var err error
	for attempt := 1; attempt <= k.unkeyAttempts; attempt++ {
		ctx, cancel := context.WithTimeout(quiet, k.unkeyTimeout)
		err = t.d.Transmitter.Unkey(ctx)
		cancel()
		if err == nil {
			p.keyed = false
			return nil
		}
		t.log.Error("could not drop the tune carrier", "attempt", attempt, "of", k.unkeyAttempts, "err", err)
		if attempt < k.unkeyAttempts {
			_ = t.d.Clock.Sleep(quiet, k.unkeyPause)
		}
	}
	p.keyed = false // nothing more this operation can do; the latch keeps everything else off
	err = fmt.Errorf("%w after %d attempts: %w", ErrUnkeyFailed, k.unkeyAttempts, err)
	t.log.Error("THE TUNE CARRIER MAY STILL BE ON: transmitting withdrawn until a reset; check the radio", "err", err)
	t.Latch(err)
	return err
}

// read takes one reading with the carrier checks: too much forward power aborts at once, a
// few readings in a row without a carrier abort as a lost carrier. The reading's position is
// where the motor was when the reflected channel was sampled.
func (p *op) read(stage string) (sample, sense.Reading, error) {
	t := p.t
	if err := p.check(); err != nil {
		return sample{}, sense.Reading{}, err
	}
	if err := p.ensureCarrier(); err != nil {
		return sample{}, sense.Reading{}, err
	}
	var r sense.Reading
	if sp := p.spare; sp != nil && !t.d.Axis.Snapshot().Moving && t.d.Axis.Position() == sp.pos {
		// the reading that found the carrier, with the motor where it still stands
		r = sp.r
		p.spare = nil
	} else {
		p.spare = nil
		start := t.d.Clock.Now()
		var err error
		if r, err = t.d.Sensor.Read(p.ctx); err != nil {
			return sample{}, r, fmt.Errorf("read the coupler: %w", err)
		}
		p.noteReadingTime(t.d.Clock.Now().Sub(start))
		if err := p.check(); err != nil {
			return sample{}, r, err // the radio may have moved while the converter worked
		}
		p.res.Readings++
	}
	if _, _, err := t.d.Axis.Poll(); err != nil {
		return sample{}, r, err
	}
	if r.Forward > t.o.MaxForward {
		return sample{}, r, fmt.Errorf("%w: %v", ErrOverPower, r.Forward)
	}
	if r.Forward < t.o.MinForward {
		p.lost++
		if p.lost >= t.par.rf.lostReadings {
			return sample{}, r, fmt.Errorf("%w: forward %v", ErrCarrierLost, r.Forward)
		}
	} else {
		p.lost = 0
	}
	s := sample{Pos: t.d.Axis.PositionAt(r.At), Gamma2: r.Gamma2()}
	if math.IsNaN(s.Gamma2) {
		s.Gamma2 = 1
	}
	t.emit(Event{Kind: KindReading, Stage: stage, Pos: s.Pos, Gamma2: s.Gamma2, SWR: r.SWR(),
		Forward: r.Forward, Freq: p.res.Freq, At: r.At})
	return s, r, nil
}

// readingTime is how long one reading takes: the median of the last few (a reading on a busy
// computer now and then takes several times its conversion time; a sweep too sparse for its dip
// because of such gaps is judged doubtful and swept again more slowly); a guess before the first.
func (p *op) readingTime() time.Duration {
	n := min(p.nRead, len(p.readDurs))
	if n == 0 {
		return p.t.par.rf.readingGuess
	}
	d := slices.Clone(p.readDurs[:n])
	slices.Sort(d)
	return d[n/2]
}

func (p *op) noteReadingTime(d time.Duration) {
	p.readDurs[p.nRead%len(p.readDurs)] = d
	p.nRead++
}

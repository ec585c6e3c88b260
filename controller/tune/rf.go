package tune

import (
	"context"
	"fmt"
	"math"
	"slices"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/sense"
)

// carrierOn makes sure there is a carrier for the RF stages: it keys the transmitter when
// allowed, or waits for the operator's carrier, checking the coupler. From here until
// carrierOff the guard watches the radio's frequency and counts the carrier time.
func (p *op) carrierOn() error {
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
		// The unkey is owed from the attempt on: the radio may have keyed before its link
		// failed to say so.
		p.keyed = true
		p.g.rfOn(t.d.Clock.Now())
		if err := t.d.Transmitter.Key(p.ctx, t.o.TunePower); err != nil {
			return fmt.Errorf("key the tune carrier: %w", err)
		}
	}
	until := t.d.Clock.Now().Add(t.o.CarrierWait)
	for {
		if err := p.check(); err != nil {
			return err
		}
		r, err := t.d.Sensor.Read(p.ctx)
		if err != nil {
			return fmt.Errorf("read the coupler: %w", err)
		}
		p.res.Readings++
		if r.Forward > t.o.MaxForward {
			return fmt.Errorf("%w: %v", ErrOverPower, r.Forward)
		}
		if r.Forward >= t.o.MinForward {
			p.g.rfOn(r.At)
			return p.check()
		}
		if !t.d.Clock.Now().Before(until) {
			return fmt.Errorf("%w within %v (forward %v, need %v)", ErrNoCarrier, t.o.CarrierWait, r.Forward, t.o.MinForward)
		}
		if err := t.d.Clock.Sleep(p.ctx, t.par.rf.carrierPoll); err != nil {
			return err
		}
	}
}

func absFreq(f physic.Frequency) physic.Frequency {
	if f < 0 {
		return -f
	}
	return f
}

// carrierOff ends the RF stages: it drops the tune carrier if the tuner keyed (or tried to key)
// it, and books the RF time. It runs however the operation ends, so it does not honour
// cancellation. An unkey that fails is retried; if every attempt fails the carrier may still be
// on, and the tuner latches a fault that withdraws its permission to transmit until a reset
// manages to unkey.
func (p *op) carrierOff() error {
	t := p.t
	p.res.RFTime = p.g.rfOff(t.d.Clock.Now())
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
	start := t.d.Clock.Now()
	r, err := t.d.Sensor.Read(p.ctx)
	if err != nil {
		return sample{}, r, fmt.Errorf("read the coupler: %w", err)
	}
	p.noteReadingTime(t.d.Clock.Now().Sub(start))
	if err := p.check(); err != nil {
		return sample{}, r, err // the radio may have moved while the converter worked
	}
	p.res.Readings++
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

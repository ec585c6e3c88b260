package tune

import (
	"context"
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/sense"
)

// carrierOn makes sure there is a carrier for the RF stages: it keys the transmitter when
// allowed, or waits for the operator's carrier, checking the coupler.
func (p *op) carrierOn() error {
	t := p.t
	if err := p.to(AwaitingCarrier); err != nil {
		return err
	}
	if t.o.Transmit && !p.keyed {
		// Never key on a frequency other than the one being tuned: the dip found would be
		// the wrong one, and the carrier somewhere it was not asked for.
		if fr, ok := t.d.Transmitter.(FrequencyReader); ok {
			if got, want := fr.Frequency(), p.res.Freq; absFreq(got-want) > offFrequency {
				return fmt.Errorf("%w: the radio is on %v, the tune is for %v", ErrOffFrequency, got, want)
			}
		}
		if err := t.d.Transmitter.Key(p.ctx, t.o.TunePower); err != nil {
			return fmt.Errorf("key the tune carrier: %w", err)
		}
		p.keyed = true
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
			if p.rfStart.IsZero() {
				p.rfStart = r.At
			}
			return nil
		}
		if !t.d.Clock.Now().Before(until) {
			return fmt.Errorf("%w within %v (forward %v, need %v)", ErrNoCarrier, t.o.CarrierWait, r.Forward, t.o.MinForward)
		}
		if err := t.d.Clock.Sleep(p.ctx, 20*time.Millisecond); err != nil {
			return err
		}
	}
}

// FrequencyReader is a Transmitter that can also say what frequency it is on (a radio over
// CAT, the simulator's radio); the tuner then refuses to key it anywhere but on the frequency
// it is tuning.
type FrequencyReader interface {
	Frequency() physic.Frequency
}

// offFrequency is how far the radio may be from the tune's frequency: well inside the loop's
// bandwidth on any band.
const offFrequency = 100 * physic.Hertz

func absFreq(f physic.Frequency) physic.Frequency {
	if f < 0 {
		return -f
	}
	return f
}

// carrierOff drops the tune carrier if the tuner keyed it, and books the RF time. It must run
// however the operation ends, so it does not honour cancellation.
func (p *op) carrierOff() {
	t := p.t
	if !p.rfStart.IsZero() {
		p.res.RFTime += t.d.Clock.Now().Sub(p.rfStart)
		p.rfStart = time.Time{}
	}
	if !p.keyed {
		return
	}
	ctx, cancel := context.WithTimeout(context.WithoutCancel(p.ctx), 5*time.Second)
	defer cancel()
	if err := t.d.Transmitter.Unkey(ctx); err != nil {
		t.log.Error("could not drop the tune carrier", "err", err)
	}
	p.keyed = false
}

// read takes one reading with the carrier checks: too much forward power aborts at once,
// three readings in a row without a carrier abort as a lost carrier. The reading's position is
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
	p.readDur = t.d.Clock.Now().Sub(start)
	p.res.Readings++
	if _, _, err := t.d.Axis.Poll(); err != nil {
		return sample{}, r, err
	}
	if r.Forward > t.o.MaxForward {
		return sample{}, r, fmt.Errorf("%w: %v", ErrOverPower, r.Forward)
	}
	if r.Forward < t.o.MinForward {
		p.lost++
		if p.lost >= 3 {
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

// readingTime is how long one reading takes (measured; a guess before the first).
func (p *op) readingTime() time.Duration {
	if p.readDur > 0 {
		return p.readDur
	}
	return 3 * time.Millisecond
}

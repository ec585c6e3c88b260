package sweeps

import (
	"context"
	"errors"
	"fmt"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/tune"
)

// Run records the operations that sub reports until ctx ends or sub is closed, and returns nil
// then; it returns an error only if Run is already running. Each operation's readings are
// assembled in memory and written as one recording when its final status arrives; an operation
// that took no readings writes nothing. Failures to write are logged, and recording goes on with
// the next operation.
//
// An operation whose events sub lost (a gap in their Seq, because the subscription was full) is
// not recorded: its samples would be incomplete, and a sweep with readings missing would read as
// a different sweep; it is logged. Nor is one whose start Run did not see (it began before the
// subscription, or its start was lost).
//
// Run does not Close sub. To keep the last operation's recording on the way out, let the
// service's Run return first, then Close sub and let Run drain it; ending ctx drops an
// operation still being assembled.
func (s *Store) Run(ctx context.Context, sub *controller.Subscription) error {
	if !s.running.CompareAndSwap(false, true) {
		return errors.New("sweeps: run: already running")
	}
	defer s.running.Store(false)
	s.lastSeq, s.cur = 0, nil
	for {
		select {
		case <-ctx.Done():
			return nil
		case e, ok := <-sub.Events():
			if !ok {
				return nil
			}
			if s.onEvent != nil {
				s.onEvent(e)
			}
			s.consume(e)
		}
	}
}

// consume takes one event of the service's stream.
func (s *Store) consume(e controller.Event) {
	if s.lastSeq != 0 && e.Seq != s.lastSeq+1 {
		if op := s.cur; op != nil && op.broken == "" {
			op.broken = fmt.Sprintf("events %d to %d were lost (the subscription was full)", s.lastSeq+1, e.Seq-1)
			op.samples = nil
		}
	}
	s.lastSeq = e.Seq
	op := s.cur
	switch e.Kind {
	case controller.EventRequest:
		st := e.Status
		switch {
		case st == nil:
		case st.State == controller.RequestRunning:
			if op != nil {
				s.log.Warn("operation not recorded: its end was not seen", "request", op.status.ID)
			}
			s.cur = newOperation(*st)
		case st.State.Final() && op != nil && st.ID == op.status.ID:
			s.cur = nil
			s.finish(op, *st)
		}
	case controller.EventTune:
		if op == nil || e.Tune == nil || e.Request != op.status.ID {
			return
		}
		switch e.Tune.Kind {
		case tune.KindMove:
			op.move(e.Tune)
		case tune.KindReading:
			op.reading(e.Tune, int(s.o.MaxBytes/minLine))
		}
	case controller.EventSnapshot:
		if op == nil || e.Snapshot == nil || e.Request != op.status.ID {
			return
		}
		op.snapshot(e.Snapshot)
	}
}

// finish writes op's recording, now that its final status has come.
func (s *Store) finish(op *operation, final controller.RequestStatus) {
	log := s.log.With("request", final.ID, "kind", final.Request.Kind)
	if op.broken != "" {
		log.Warn("operation not recorded", "why", op.broken)
		return
	}
	if len(op.samples) == 0 {
		return
	}
	data, err := op.encode(final, s.o.Meta)
	if err != nil {
		log.Error("operation not recorded: encoding failed", "err", err)
		return
	}
	if int64(len(data)) > s.o.MaxBytes {
		log.Warn("operation not recorded: larger than the store's limit", "bytes", len(data), "max_bytes", s.o.MaxBytes)
		return
	}
	info := Info{Time: op.start().UTC().Round(0), Request: final.ID, Kind: final.Request.Kind, Freq: final.Request.Freq,
		Samples: len(op.samples)}
	if res := final.Result; res != nil {
		info.Outcome = res.Outcome
		if res.Freq > 0 {
			info.Freq = res.Freq
		}
	}
	info, err = s.write(newID(op.start(), uint64(final.ID)), data, info)
	if err != nil {
		log.Error("operation not recorded", "err", err)
		return
	}
	log.Info("operation recorded", "id", info.ID, "samples", info.Samples, "bytes", info.Size)
	if s.onWrite != nil {
		s.onWrite(info)
	}
}

package tune

import (
	"context"
	"fmt"

	"github.com/tankd/tankd/controller/motion"
)

// Goto moves the motor to step with no RF, arriving from the axis's approach side with the gear
// play taken up, as every final position is reached, so that the capacitor stands where a tune
// to step would leave it. The operation runs on the same safety path as the others (op.run):
// the motor is stopped however it ends. It is refused with a fault latched, with the position
// untrusted (NeedsHoming where there is a home switch, NeedsReference otherwise), and for a step
// outside the soft limits (OutOfRange), before anything moves. The outcome is Positioned.
func (t *Tuner) Goto(ctx context.Context, step motion.Steps) Result {
	p := t.begin(ctx, 0)
	return p.run(func() (Outcome, error) {
		if err := p.ready(); err != nil {
			return "", fmt.Errorf("goto %d: %w", step, err)
		}
		ax := t.d.Axis
		if !ax.Trusted() {
			why := ErrNeedsReference
			if t.o.HasHome {
				why = ErrNeedsHoming
			}
			return "", fmt.Errorf("goto %d: %w (%s)", step, why, ax.Snapshot().Distrust)
		}
		if lo, hi := ax.SoftLimits(); step < lo || step > hi {
			return "", fmt.Errorf("goto %d: %w: the step is outside the soft limits %d–%d", step, ErrOutOfRange, lo, hi)
		}
		if err := p.to(Positioning); err != nil {
			return "", err
		}
		if err := p.move("goto", step, approachMove); err != nil {
			return "", err
		}
		t.emit(Event{Kind: KindPositioned, Pos: float64(step)})
		return Positioned, nil
	})
}

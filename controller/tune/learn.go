package tune

import (
	"errors"
	"fmt"
	"math"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
)

// surprise remembers a dip found far from where the map put it, until the next tune shows
// whether the position slipped (the same offset again) or the map was wrong.
type surprise struct {
	pt    memmap.Point
	delta float64
}

// learn teaches the map the tune just made, unless the dip turned up so far from the
// prediction that the position itself may have slipped: such a tune is held back until the
// next one shows which it was. Two surprises in a row with the same offset are lost steps: with
// a home switch the axis is marked for homing; a freely turning capacitor is re-referenced by
// that offset; a capacitor with hard stops and no home switch is never re-referenced by a search
// (a wrong map would walk the motor into a stop): its position is distrusted until the operator
// references it. Once the position has been confirmed (homed or referenced by hand) and the
// surprise still repeats, the map was wrong: the new points replace the ones they contradict.
func (p *op) learn(pred Prediction) {
	t := p.t
	k := &t.par.learn
	r := p.res
	r.Pos = t.d.Axis.Position()
	temp, hasTemp := t.temperature()
	pt := memmap.Point{Freq: r.Freq, Pos: r.Pos, At: t.d.Clock.Now(), SWR: math.Max(r.SWR, 1)}
	if hasTemp {
		pt.Temp, pt.HasTemp = *temp, true
	}
	if r.Fit != nil {
		pt.Q = r.Fit.QLoaded
	}
	delta := float64(r.Pos) - pred.Pos
	far := pred.learned() && math.Abs(delta) > math.Max(t.o.SlipLimit*pred.Sigma, k.slipWidths*pred.Width+k.slipSteps)
	prev, confirmed := t.surprise, t.confirmed
	t.surprise, t.confirmed = nil, false
	again := far && prev != nil && math.Abs(delta-prev.delta) <= k.sameShare*math.Abs(delta)+k.sameWidths*pred.Width+k.sameSteps
	switch {
	case again && confirmed:
		n := t.d.Map.Forget(func(q memmap.Point) bool { return t.sameBand(q.Freq, pt.Freq) || t.sameBand(q.Freq, prev.pt.Freq) })
		t.note(r, "dips turned up %.0f steps from the map again after the position was confirmed: the map was wrong here; %d contradicted point(s) replaced", delta, n)
		p.learnPoint(prev.pt)
		p.learnPoint(pt)
	case again:
		shift := motion.Steps(math.Round((delta + prev.delta) / 2))
		r.Shift = shift
		switch {
		case t.o.HasHome:
			t.d.Axis.Distrust(fmt.Sprintf("dips found %d steps from the map twice running", shift))
			t.surprise = &surprise{pt: pt, delta: delta}
			t.note(r, "dips turned up %d steps from the map twice running: lost steps, or a wrong map; homing before the next tune", shift)
		case t.o.HardStops:
			t.d.Axis.Distrust(fmt.Sprintf("dips found %d steps from the map twice running: reference the position by hand", shift))
			t.surprise = &surprise{pt: pt, delta: delta}
			t.note(r, "dips turned up %d steps from the map twice running: lost steps, or a wrong map; with hard stops and no home switch the operator must reference the position", shift)
		default:
			t.d.Axis.Reference(t.d.Axis.Position() - shift)
			t.note(r, "dips turned up %d steps from the map twice running: lost steps; position re-referenced by %d", shift, -shift)
			prev.pt.Pos -= shift
			pt.Pos -= shift
			p.learnPoint(prev.pt)
			p.learnPoint(pt)
		}
	case far:
		t.surprise = &surprise{pt: pt, delta: delta}
		t.note(r, "dip %.0f steps from the map's prediction (σ %.1f): held back until the next tune", delta, pred.Sigma)
	default:
		if prev != nil && !confirmed {
			// the surprise was the map's, locally: the position agrees with it again. (After a
			// homing or a hand reference the held-back point belongs to the old frame.)
			p.learnPoint(prev.pt)
		}
		p.learnPoint(pt)
	}
}

// sameBand says whether two frequencies are close enough for one to contradict the other's
// map point.
func (t *Tuner) sameBand(a, b physic.Frequency) bool {
	return math.Abs(float64(a)-float64(b)) <= t.par.learn.sameBand*float64(b)
}

func (p *op) learnPoint(pt memmap.Point) {
	t := p.t
	if err := t.d.Map.Learn(pt); err != nil {
		if !errors.Is(err, memmap.ErrSuperseded) {
			t.log.Warn("memory map refused a point", "freq", pt.Freq, "pos", pt.Pos, "err", err)
		}
		return
	}
	p.res.Learned++
}

package sweeps

import (
	"bytes"
	"fmt"
	"math"
	"strconv"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/record"
	"github.com/tankd/tankd/controller/tune"
)

// minLine is the fewest bytes a sample takes in a recording ("0.000000 0 + 0 0.0000 0.0000 1"
// and its newline): an operation with more than MaxBytes/minLine readings cannot fit, and is
// not kept in memory past that.
const minLine = 31

// Metadata keys the store writes. Units are in the names, as the format's column names have
// them.
const (
	keySource        = "source"         // always "tankd"
	keyRequest       = "request"        // the service's request ID
	keyKind          = "kind"           // controller.Kind: tune, calibrate, follow…
	keyRequestSource = "request_source" // controller.Source: who asked
	keyState         = "state"          // the request's final state: done, cancelled
	keyOutcome       = "outcome"        // tune.Outcome
	keyError         = "error"          // the cause, for an outcome other than success
	keyFreq          = "freq_hz"        // the operation's frequency
	keyFinished      = "finished"       // RFC 3339, when the operation ended
	keyRF            = "rf_s"           // carrier time the operation used
	keySamples       = "samples"        // how many samples follow: a shorter file is damaged
	keyFitMethod     = "fit_method"
	keyFitCentre     = "fit_centre_step" // final-approach coordinates, as the tuner fits them
	keyFitHalfWidth  = "fit_half_width_steps"
	keyFitQ          = "fit_q" // loaded Q, when the map's slope gave one
	keyFitMinSWR     = "fit_min_swr"
	keyVerifiedSWR   = "verified_swr"
	keyFinal         = "final_step"
	keyBacklash      = "backlash_steps"          // the axis's backlash in use during the operation
	keyMeasured      = "measured_backlash_steps" // what a calibration measured
)

// ownKeys are the keys the store sets; Options.Meta may not use them.
var ownKeys = []string{keySource, keyRequest, keyKind, keyRequestSource, keyState, keyOutcome, keyError,
	keyFreq, keyFinished, keyRF, keySamples, keyFitMethod, keyFitCentre, keyFitHalfWidth, keyFitQ, keyFitMinSWR,
	keyVerifiedSWR, keyFinal, keyBacklash, keyMeasured}

// operation is one request's RF work as the event stream tells it, assembled until its final
// status arrives.
type operation struct {
	status  controller.RequestStatus // as it started running
	samples []record.Sample
	// broken says why the operation's recording must not be written (events lost, too many
	// readings); empty while it may be.
	broken string

	// dir is the direction a reading taken now is recorded with (0 until a move or the axis
	// says).
	dir motion.Direction
	// sweeping: the latest move is a sweep whose readings are taken on the move; otherwise it
	// is a positioning move, over before any reading, whose arrival the axis reports.
	sweeping bool
	moved    bool         // a move has been reported
	target   motion.Steps // of the latest move

	backlash    motion.Steps
	sawBacklash bool
}

func newOperation(st controller.RequestStatus) *operation {
	return &operation{status: st}
}

// start is the instant the recording's sample times count from: when the request started.
func (op *operation) start() time.Time { return op.status.Started }

// move notes a move the tuner reported. A reading taken on a sweep belongs to it and has its
// direction. A positioning move (Speed 0) runs to its end before anything is read; its Pos →
// Target says which way it went, but an approach from the far side ends with a run-up leg the
// other way, so the direction of its arrival is taken from the axis (see snapshot) once the
// service reports the axis at rest there.
func (op *operation) move(e *tune.Event) {
	op.moved, op.sweeping, op.target = true, e.Speed > 0, e.Target
	switch d := float64(e.Target) - e.Pos; {
	case d > 0:
		op.dir = motion.Up
	case d < 0:
		op.dir = motion.Down
	}
}

// snapshot notes what the service published about the axis: the backlash in use, and, at rest
// after a positioning move (or before any move), the direction in which the last motion took up
// the gear play, which is the direction of the most recent travel.
func (op *operation) snapshot(sn *controller.Snapshot) {
	ax := sn.Axis
	op.backlash, op.sawBacklash = ax.Backlash, true
	if op.sweeping || ax.Moving || ax.Play == 0 || op.moved && ax.Position != op.target {
		return
	}
	op.dir = ax.Play
}

// reading adds one reading as a sample. maxSamples bounds the operation's memory.
func (op *operation) reading(e *tune.Event, maxSamples int) {
	if op.broken != "" {
		return
	}
	if len(op.samples) >= maxSamples {
		op.broken = fmt.Sprintf("more than %d readings, more than the size limit holds", maxSamples)
		op.samples = nil
		return
	}
	t := max(e.At.Sub(op.start()), 0)
	if n := len(op.samples); n > 0 {
		t = max(t, op.samples[n-1].T) // a clock that stepped back must not make the file unreadable
	}
	dir := op.dir
	if dir == 0 {
		// nothing has said: the final-approach direction, in which the tuner's coordinates hold
		dir = motion.Up
	}
	g2 := e.Gamma2
	if math.IsNaN(g2) {
		g2 = 1
	}
	g2 = min(max(g2, 0), 1)
	op.samples = append(op.samples, record.Sample{
		T:         t,
		Step:      motion.Steps(math.Round(e.Pos)),
		Dir:       dir,
		Freq:      e.Freq,
		Forward:   max(e.Forward, 0),
		Reflected: physic.Power(math.Round(g2 * float64(max(e.Forward, 0)))),
		SWR:       e.SWR,
	})
}

// encode writes the finished operation as a recording: the header from its final status, then
// its samples.
func (op *operation) encode(final controller.RequestStatus, extra map[string]string) ([]byte, error) {
	meta := make(map[string]string, len(extra)+len(ownKeys))
	for k, v := range extra {
		meta[k] = v
	}
	st := op.status
	meta[keySource] = "tankd"
	meta[keyRequest] = strconv.FormatUint(uint64(st.ID), 10)
	meta[keyKind] = string(st.Request.Kind)
	meta[keyRequestSource] = string(st.Request.Source)
	meta[keyState] = string(final.State)
	meta[keySamples] = strconv.Itoa(len(op.samples))
	freq := st.Request.Freq
	if res := final.Result; res != nil {
		meta[keyOutcome] = string(res.Outcome)
		if res.Err != nil {
			meta[keyError] = res.Err.Error()
		}
		if res.Freq > 0 {
			freq = res.Freq
		}
		if !res.Finished.IsZero() {
			meta[keyFinished] = res.Finished.UTC().Format(time.RFC3339Nano)
		}
		meta[keyRF] = formatFloat(res.RFTime.Seconds())
		meta[keyFinal] = strconv.FormatInt(int64(res.Pos), 10)
		if res.SWR > 0 {
			meta[keyVerifiedSWR] = formatFloat(res.SWR)
		}
		if f := res.Fit; f != nil {
			meta[keyFitMethod] = f.Method
			meta[keyFitCentre] = formatFloat(f.Centre)
			meta[keyFitHalfWidth] = formatFloat(f.HalfWidth)
			meta[keyFitMinSWR] = formatFloat(f.MinSWR)
			if f.QLoaded > 0 {
				meta[keyFitQ] = formatFloat(f.QLoaded)
			}
		}
		if res.Outcome == tune.Calibrated {
			meta[keyMeasured] = strconv.FormatInt(int64(res.Backlash), 10)
		}
	}
	if freq > 0 {
		meta[keyFreq] = formatFrequency(freq)
	}
	if op.sawBacklash {
		meta[keyBacklash] = strconv.FormatInt(int64(op.backlash), 10)
	}
	var b bytes.Buffer
	w, err := record.NewWriter(&b, record.Header{Start: op.start().UTC(), Meta: meta})
	if err != nil {
		return nil, err
	}
	for _, s := range op.samples {
		if err := w.Write(s); err != nil {
			return nil, err
		}
	}
	if err := w.Flush(); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

func formatFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// formatFrequency writes f in hertz, exactly: physic.Frequency counts microhertz.
func formatFrequency(f physic.Frequency) string {
	hz, frac := int64(f/physic.Hertz), int64(f%physic.Hertz)
	if frac == 0 {
		return strconv.FormatInt(hz, 10)
	}
	s := fmt.Sprintf("%d.%06d", hz, frac)
	for s[len(s)-1] == '0' {
		s = s[:len(s)-1]
	}
	return s
}

// parseFrequency reads what formatFrequency wrote (hertz, up to six decimals).
func parseFrequency(s string) (physic.Frequency, bool) {
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || v < 0 || v > float64(math.MaxInt64/int64(physic.Hertz)) || math.IsNaN(v) {
		return 0, false
	}
	return physic.Frequency(math.Round(v * float64(physic.Hertz))), true
}

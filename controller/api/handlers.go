package api

import (
	"context"
	"errors"
	"fmt"
	"net/http"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/motion"
)

// status is GET /api/v1/status.
func (a *API) status(w http.ResponseWriter, r *http.Request) error {
	writeJSON(w, http.StatusOK, a.statusOf(a.s.Snapshot(), true))
	return nil
}

// statusOf turns a snapshot into the status clients see. The headline figures are the
// running operation's live ones while one runs, and the last operation's verified ones once it
// has ended: after a tune, swr is the SWR the tune verified. now: the snapshot is the latest,
// and the radio link is told as the follower knows it now (a source that speaks without a
// change of frequency does not republish the snapshot), with its age; otherwise (an event of
// the past) as the snapshot holds it.
func (a *API) statusOf(sn controller.Snapshot, now bool) statusJSON {
	lo, hi := a.s.SoftLimits()
	out := statusJSON{
		At: sn.At, Version: a.o.Version, State: sn.State, Busy: sn.Busy, FrequencyHz: knownHz(sn.Freq),
		PositionSteps: sn.Axis.Position, PositionTrusted: sn.Axis.Trusted, Distrust: sn.Axis.Distrust,
		Moving: sn.Axis.Moving, BacklashSteps: sn.Axis.Backlash, SoftLimits: limitsJSON{Min: lo, Max: hi},
		Fault: orNil(sn.Fault), MapPoints: sn.MapPoints, LastRequestID: idOrNil(sn.LastRequest),
		Queue: make([]requestJSON, 0, len(sn.Queue)), Notices: sn.Notices, Stopped: sn.Stopped,
	}
	if out.Notices == nil {
		out.Notices = []string{}
	}
	l := sn.Live
	out.Live = liveJSON{At: timeOrNil(l.At), FrequencyHz: knownHz(l.Freq), SWR: known(l.SWR),
		ForwardW: known(watts(l.Forward)), ReflectedW: known(watts(l.Reflected)), QLoaded: known(l.QLoaded),
		BandwidthHz: known(l.Bandwidth)}
	if !l.At.IsZero() {
		p := num(l.Pos)
		out.Live.Pos = &p
	}
	out.ForwardW, out.ReflectedW = out.Live.ForwardW, out.Live.ReflectedW
	out.SWR, out.QLoaded, out.BandwidthHz = out.Live.SWR, out.Live.QLoaded, out.Live.BandwidthHz
	if sn.Last != nil {
		res := resultOf(*sn.Last)
		out.Last = &res
		out.Outcome = orNil(string(sn.Last.Outcome))
		if !sn.Busy {
			out.SWR = res.SWR
			if f := sn.Last.Fit; f != nil && f.QLoaded > 0 {
				out.QLoaded, out.BandwidthHz = known(f.QLoaded), known(f.Bandwidth)
			}
		}
	}
	out.RequestID = idOrNil(sn.Request)
	if sn.Running != nil {
		rq := requestOf(*sn.Running)
		out.Running = &rq
	} else {
		out.RequestID = idOrNil(sn.LastRequest)
	}
	for _, q := range sn.Queue {
		out.Queue = append(out.Queue, requestOf(q))
	}
	d := sn.Drift
	out.Drift = driftJSON{At: timeOrNil(d.At), Epsilon: num(d.Epsilon), EpsilonSigma: num(d.EpsilonSigma),
		OffsetSteps: num(d.Offset), OffsetSigma: num(d.OffsetSigma)}
	out.Radio, out.Link = a.radio(sn.Radio, now)
	return out
}

// radio is the radio link as the snapshot holds it or, now, as the follower (if there is one)
// knows it at this moment, with the age of its last word.
func (a *API) radio(rs controller.RadioStatus, now bool) (radioJSON, string) {
	f, src, heard, stale := rs.Freq, rs.Source, rs.Heard, rs.Stale
	if fl := a.o.Follower; fl != nil && now {
		st := fl.Status()
		f, src, heard, stale = st.Freq, st.Source, st.Heard, st.Stale
	}
	out := radioJSON{FrequencyHz: knownHz(f), Source: string(src), Heard: timeOrNil(heard), Stale: stale}
	if heard.IsZero() {
		return out, linkNone
	}
	if now {
		age := num(max(a.o.Clock.Now().Sub(heard), 0).Seconds())
		out.AgeS = &age
	}
	if stale {
		return out, linkStale
	}
	return out, linkHeard
}

// currentFrequency is the frequency a tune or calibration without one is for: the radio's, as
// last reported, or else the last operation's.
func (a *API) currentFrequency() (physic.Frequency, bool) {
	sn := a.s.Snapshot()
	if a.o.Follower != nil {
		if f := a.o.Follower.Status().Freq; f > 0 {
			return f, true
		}
	}
	if sn.Radio.Freq > 0 {
		return sn.Radio.Freq, true
	}
	return sn.Freq, sn.Freq > 0
}

// submit submits q for the API and answers 202 with its ID and state, and what it cancelled
// and replaced.
func (a *API) submit(w http.ResponseWriter, q controller.Request) error {
	q.Source = controller.SourceAPI
	before := a.s.Snapshot()
	id, err := a.s.Submit(q)
	if err != nil {
		return a.submitError(err)
	}
	a.accepted(w, id, before)
	return nil
}

func (a *API) submitError(err error) error {
	if errors.Is(err, controller.ErrStopped) {
		return &apiError{Status: http.StatusServiceUnavailable, Message: err.Error()}
	}
	// The service refuses what the loop cannot do as it stands (no home switch, say).
	return &apiError{Status: http.StatusConflict, Message: err.Error()}
}

// accepted answers 202 for request id, submitted when the service looked like before.
func (a *API) accepted(w http.ResponseWriter, id controller.RequestID, before controller.Snapshot) {
	st, _ := a.s.Request(id)
	out := acceptedJSON{RequestID: uint64(id), Kind: st.Request.Kind, State: st.State, Cancelled: []uint64{}, Replaced: []uint64{}}
	rq := requestOf(st)
	out.FrequencyHz, out.Step = rq.FrequencyHz, rq.Step
	if run := before.Running; run != nil {
		if rs, ok := a.s.Request(run.ID); ok && rs.By == id {
			out.Cancelled = append(out.Cancelled, uint64(run.ID))
		}
	}
	for _, q := range before.Queue {
		if rs, ok := a.s.Request(q.ID); ok && rs.By == id {
			if rs.State == controller.RequestReplaced {
				out.Replaced = append(out.Replaced, uint64(q.ID))
			} else {
				out.Cancelled = append(out.Cancelled, uint64(q.ID))
			}
		}
	}
	writeJSON(w, http.StatusAccepted, out)
}

// frequency is POST /api/v1/frequency: the radio is on hz, as if it had reported it. The
// radio's VFO is moved first (Options.SetFrequency); then the follower decides at once
// (Follower.Settled): 202 with the Follow it submitted, or 200 when the loop is tuned, or being
// tuned, there already. Without a follower a Follow is submitted.
func (a *API) frequency(w http.ResponseWriter, r *http.Request) error {
	body, err := jsonBody(w, r)
	if err != nil {
		return err
	}
	f, _, err := decodeFreqBody(body, true)
	if err != nil {
		return err
	}
	if a.o.SetFrequency != nil {
		if err := a.o.SetFrequency(f); err != nil {
			return &apiError{Status: http.StatusBadGateway, Field: "hz", Message: fmt.Sprintf("the radio did not take the frequency: %v", err)}
		}
	}
	if a.o.Follower == nil {
		return a.submit(w, controller.Request{Kind: controller.Follow, Freq: f})
	}
	before := a.s.Snapshot()
	id, err := a.o.Follower.Settled(f, controller.SourceAPI)
	if err != nil {
		return a.submitError(err)
	}
	if id == 0 {
		writeJSON(w, http.StatusOK, map[string]any{"request_id": nil, "frequency_hz": hz(f),
			"note": "nothing to do: the loop is tuned there, is being tuned there, or the last attempt there failed (ask for a tune to try again)"})
		return nil
	}
	a.accepted(w, id, before)
	return nil
}

// freqRequest is the common part of tune and calibrate: {"hz": N} or the current frequency.
func (a *API) freqRequest(w http.ResponseWriter, r *http.Request, k controller.Kind) error {
	body, err := jsonBody(w, r)
	if err != nil {
		return err
	}
	f, ok, err := decodeFreqBody(body, false)
	if err != nil {
		return err
	}
	if !ok {
		if f, ok = a.currentFrequency(); !ok {
			return unprocessable("hz", "no frequency known yet: give hz")
		}
	}
	return a.submit(w, controller.Request{Kind: k, Freq: f})
}

// tune is POST /api/v1/tune.
func (a *API) tune(w http.ResponseWriter, r *http.Request) error {
	return a.freqRequest(w, r, controller.Tune)
}

// calibrate is POST /api/v1/calibrate-backlash.
func (a *API) calibrate(w http.ResponseWriter, r *http.Request) error {
	return a.freqRequest(w, r, controller.Calibrate)
}

// plain submits a request of kind k that takes no body.
func (a *API) plain(w http.ResponseWriter, r *http.Request, k controller.Kind) error {
	body, err := jsonBody(w, r)
	if err != nil {
		return err
	}
	if err := decodeEmptyBody(body); err != nil {
		return err
	}
	return a.submit(w, controller.Request{Kind: k})
}

// stop is POST /api/v1/stop: it cancels whatever runs (a homing too) and clears the queue, at
// once.
func (a *API) stop(w http.ResponseWriter, r *http.Request) error {
	return a.plain(w, r, controller.Stop)
}

// reset is POST /api/v1/reset.
func (a *API) reset(w http.ResponseWriter, r *http.Request) error {
	return a.plain(w, r, controller.Reset)
}

// home is POST /api/v1/home.
func (a *API) home(w http.ResponseWriter, r *http.Request) error {
	body, err := jsonBody(w, r)
	if err != nil {
		return err
	}
	if err := decodeEmptyBody(body); err != nil {
		return err
	}
	if !a.s.HasHome() {
		return &apiError{Status: http.StatusConflict, Message: "the loop has no home switch: reference it instead (POST /api/v1/reference)"}
	}
	return a.submit(w, controller.Request{Kind: controller.Home})
}

// stepBody reads {"step": N} and checks it against the soft limits.
func (a *API) stepBody(w http.ResponseWriter, r *http.Request) (motion.Steps, error) {
	body, err := jsonBody(w, r)
	if err != nil {
		return 0, err
	}
	step, err := decodeStepBody(body)
	if err != nil {
		return 0, err
	}
	if lo, hi := a.s.SoftLimits(); step < lo || step > hi {
		return 0, unprocessable("step", "%d: outside the soft limits %d–%d", step, lo, hi)
	}
	return step, nil
}

// gotoStep is POST /api/v1/goto: only from a trusted position.
func (a *API) gotoStep(w http.ResponseWriter, r *http.Request) error {
	step, err := a.stepBody(w, r)
	if err != nil {
		return err
	}
	if ax := a.s.Snapshot().Axis; !ax.Trusted {
		why := ax.Distrust
		if why == "" {
			why = "not referenced"
		}
		return &apiError{Status: http.StatusConflict, Field: "step", Message: "the motor's position is not trusted (" + why + "): home or reference it first"}
	}
	return a.submit(w, controller.Request{Kind: controller.Goto, Step: step})
}

// reference is POST /api/v1/reference: the operator says where the motor stands.
func (a *API) reference(w http.ResponseWriter, r *http.Request) error {
	step, err := a.stepBody(w, r)
	if err != nil {
		return err
	}
	return a.submit(w, controller.Request{Kind: controller.Reference, Step: step})
}

// request is GET /api/v1/requests/{id}[?wait=5s]: the request's state and result; with wait,
// once it is final or the wait is over, whichever comes first.
func (a *API) request(w http.ResponseWriter, r *http.Request) error {
	id, err := parseRequestID(r.PathValue("id"))
	if err != nil {
		return err
	}
	wait, err := parseWait(r.URL.Query().Get("wait"))
	if err != nil {
		return err
	}
	st, ok := a.s.Request(id)
	if !ok {
		return &apiError{Status: http.StatusNotFound, Field: "id", Message: fmt.Sprintf("request %d: %v (or older than the history keeps)", id, controller.ErrUnknownRequest)}
	}
	if wait > 0 && !st.State.Final() {
		// A long poll: on the wall clock, since it is the client's time that is bounded.
		ctx, cancel := context.WithTimeout(r.Context(), wait)
		got, err := a.s.Wait(ctx, id)
		cancel()
		switch {
		case err == nil:
			st = got
		case r.Context().Err() != nil:
			return nil // the client has gone
		default:
			if now, ok := a.s.Request(id); ok {
				st = now
			}
		}
	}
	writeJSON(w, http.StatusOK, requestOf(st))
	return nil
}

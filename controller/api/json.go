package api

import (
	"encoding/json"
	"math"
	"strconv"
	"strings"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/tune"
)

// The JSON the API sends. Units are in the names (_hz, _w, _s, _steps); frequencies are numbers
// of hertz with up to six decimals (the controller keeps microhertz); a value that is unknown
// is null rather than a made-up 0.

// num is a float sent as a JSON number, or null when it is not finite (encoding/json refuses
// NaN and the infinities; an SWR at total reflection is infinite).
type num float64

// MarshalJSON implements json.Marshaler.
func (n num) MarshalJSON() ([]byte, error) {
	v := float64(n)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, v, 'g', -1, 64), nil
}

// known is v as a JSON number, or null when it is 0 (unknown, not measured) or not finite.
func known(v float64) *num {
	if v == 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	n := num(v)
	return &n
}

// hz is a frequency as a JSON number of hertz, exact to the microhertz.
func hz(f physic.Frequency) json.Number {
	neg := f < 0
	if neg {
		f = -f
	}
	whole, frac := int64(f/physic.Hertz), int64(f%physic.Hertz)
	s := strconv.FormatInt(whole, 10)
	if frac != 0 {
		s += "." + strings.TrimRight(strconv.FormatInt(frac+int64(physic.Hertz), 10)[1:], "0")
	}
	if neg {
		s = "-" + s
	}
	return json.Number(s)
}

// knownHz is a frequency, or null when it is 0 (unknown).
func knownHz(f physic.Frequency) *json.Number {
	if f == 0 {
		return nil
	}
	n := hz(f)
	return &n
}

func watts(p physic.Power) float64 { return float64(p) / float64(physic.Watt) }

func seconds(d time.Duration) num { return num(d.Seconds()) }

func orNil(s string) *string {
	if s == "" {
		return nil
	}
	return &s
}

// statusJSON is GET /api/v1/status, and the data of the event stream's snapshot events.
type statusJSON struct {
	Seq             uint64        `json:"seq,omitempty"` // the snapshot event's number, in the event stream
	At              time.Time     `json:"at"`
	Version         string        `json:"version,omitempty"`
	State           tune.State    `json:"state"`
	Busy            bool          `json:"busy"`
	Outcome         *string       `json:"outcome"`
	FrequencyHz     *json.Number  `json:"frequency_hz"`
	PositionSteps   int64         `json:"position_steps"`
	PositionTrusted bool          `json:"position_trusted"`
	Distrust        string        `json:"distrust,omitempty"`
	Moving          bool          `json:"moving"`
	BacklashSteps   int64         `json:"backlash_steps"`
	SoftLimits      limitsJSON    `json:"soft_limits"`
	SWR             *num          `json:"swr"`
	ForwardW        *num          `json:"forward_w"`
	ReflectedW      *num          `json:"reflected_w"`
	QLoaded         *num          `json:"q_loaded"`
	BandwidthHz     *num          `json:"bandwidth_hz"`
	Fault           *string       `json:"fault"`
	MapPoints       int           `json:"map_points"`
	Link            string        `json:"link"`
	Radio           radioJSON     `json:"radio"`
	RequestID       *uint64       `json:"request_id"`
	Running         *requestJSON  `json:"running"`
	Queue           []requestJSON `json:"queue"`
	Last            *resultJSON   `json:"last"`
	LastRequestID   *uint64       `json:"last_request_id"`
	Live            liveJSON      `json:"live"`
	Drift           driftJSON     `json:"drift"`
	Notices         []string      `json:"notices"`
	Stopped         bool          `json:"stopped"`
}

type limitsJSON struct {
	Min int64 `json:"min"`
	Max int64 `json:"max"`
}

type radioJSON struct {
	FrequencyHz *json.Number `json:"frequency_hz"`
	Source      string       `json:"source,omitempty"`
	Heard       *time.Time   `json:"heard"`
	AgeS        *num         `json:"age_s"`
	Stale       bool         `json:"stale"`
}

type liveJSON struct {
	At          *time.Time   `json:"at"`
	FrequencyHz *json.Number `json:"frequency_hz"`
	Pos         *num         `json:"pos"`
	SWR         *num         `json:"swr"`
	ForwardW    *num         `json:"forward_w"`
	ReflectedW  *num         `json:"reflected_w"`
	QLoaded     *num         `json:"q_loaded"`
	BandwidthHz *num         `json:"bandwidth_hz"`
}

type driftJSON struct {
	At           *time.Time `json:"at"`
	Epsilon      num        `json:"epsilon"`
	EpsilonSigma num        `json:"epsilon_sigma"`
	OffsetSteps  num        `json:"offset_steps"`
	OffsetSigma  num        `json:"offset_sigma_steps"`
}

// The link to the radio, as the status gives it.
const (
	linkNone  = "none"  // nothing has reported the radio's frequency
	linkHeard = "heard" // a source reports it
	linkStale = "stale" // the source has gone silent: the frequency may be out of date
)

func timeOrNil(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	return &t
}

func idOrNil(id controller.RequestID) *uint64 {
	if id == 0 {
		return nil
	}
	v := uint64(id)
	return &v
}

// requestJSON is a request and, once it has run, its result.
type requestJSON struct {
	ID          uint64                  `json:"id"`
	Kind        controller.Kind         `json:"kind"`
	Source      controller.Source       `json:"source"`
	FrequencyHz *json.Number            `json:"frequency_hz,omitempty"`
	Step        *int64                  `json:"step,omitempty"`
	State       controller.RequestState `json:"state"`
	Final       bool                    `json:"final"`
	Submitted   time.Time               `json:"submitted"`
	Started     *time.Time              `json:"started"`
	Finished    *time.Time              `json:"finished"`
	By          *uint64                 `json:"by"`
	Result      *resultJSON             `json:"result"`
}

func requestOf(st controller.RequestStatus) requestJSON {
	q := st.Request
	out := requestJSON{
		ID: uint64(st.ID), Kind: q.Kind, Source: q.Source, State: st.State, Final: st.State.Final(),
		Submitted: st.Submitted, Started: timeOrNil(st.Started), Finished: timeOrNil(st.Finished), By: idOrNil(st.By),
	}
	switch q.Kind {
	case controller.Follow, controller.Preposition, controller.Tune, controller.Calibrate:
		out.FrequencyHz = knownHz(q.Freq)
	case controller.Goto, controller.Reference:
		s := q.Step
		out.Step = &s
	}
	out.Result = mapPtr(st.Result, resultOf)
	return out
}

// resultJSON is an operation's result.
type resultJSON struct {
	Outcome          tune.Outcome    `json:"outcome"`
	Error            *string         `json:"error"`
	FrequencyHz      *json.Number    `json:"frequency_hz"`
	Started          time.Time       `json:"started"`
	Finished         time.Time       `json:"finished"`
	DurationS        num             `json:"duration_s"`
	RFTimeS          num             `json:"rf_time_s"`
	PositionSteps    int64           `json:"position_steps"`
	SWR              *num            `json:"swr"`
	Prepositioned    bool            `json:"prepositioned"`
	PrepositionSteps *int64          `json:"preposition_steps,omitempty"`
	Readings         int             `json:"readings"`
	Widened          int             `json:"widened"`
	BacklashSteps    *int64          `json:"backlash_steps,omitempty"`
	ShiftSteps       *int64          `json:"shift_steps,omitempty"`
	Learned          int             `json:"learned"`
	Notes            []string        `json:"notes"`
	Prediction       *predictionJSON `json:"prediction,omitempty"`
	Fit              *fitJSON        `json:"fit,omitempty"`
}

func resultOf(r tune.Result) resultJSON {
	out := resultJSON{
		Outcome: r.Outcome, FrequencyHz: knownHz(r.Freq), Started: r.Started, Finished: r.Finished,
		DurationS: seconds(r.Duration()), RFTimeS: seconds(r.RFTime), PositionSteps: r.Pos, SWR: known(r.SWR),
		Prepositioned: r.Prepositioned, Readings: r.Readings, Widened: r.Widened, Learned: r.Learned,
		Notes: r.Notes,
	}
	if out.Notes == nil {
		out.Notes = []string{}
	}
	if r.Err != nil {
		out.Error = orNil(r.Err.Error())
	}
	if r.Prepositioned {
		p := r.PrePos
		out.PrepositionSteps = &p
	}
	if r.Outcome == tune.Calibrated {
		b := r.Backlash
		out.BacklashSteps = &b
	}
	if r.Shift != 0 {
		s := r.Shift
		out.ShiftSteps = &s
	}
	out.Prediction, out.Fit = mapPtr(r.Prediction, predictionOf), mapPtr(r.Fit, fitOf)
	return out
}

// mapPtr converts what v points to by f; nil stays nil.
func mapPtr[T, U any](v *T, f func(T) U) *U {
	if v == nil {
		return nil
	}
	u := f(*v)
	return &u
}

type predictionJSON struct {
	PositionSteps num    `json:"position_steps"`
	SigmaSteps    num    `json:"sigma_steps"`
	WidthSteps    num    `json:"width_steps"`
	QLoaded       *num   `json:"q_loaded"`
	Source        string `json:"source"`
	Trusted       bool   `json:"trusted"`
}

func predictionOf(p tune.Prediction) predictionJSON {
	return predictionJSON{PositionSteps: num(p.Pos), SigmaSteps: num(p.Sigma), WidthSteps: num(p.Width),
		QLoaded: known(p.Q), Source: p.Source, Trusted: p.Trusted}
}

type fitJSON struct {
	Method         string `json:"method"`
	CentreSteps    num    `json:"centre_steps"`
	HalfWidthSteps num    `json:"half_width_steps"`
	QLoaded        *num   `json:"q_loaded"`
	BandwidthHz    *num   `json:"bandwidth_hz"`
	MinSWR         *num   `json:"min_swr"`
	Chi2           num    `json:"chi2"`
	Samples        int    `json:"samples"`
}

func fitOf(f tune.FitReport) fitJSON {
	return fitJSON{Method: f.Method, CentreSteps: num(f.Centre), HalfWidthSteps: num(f.HalfWidth),
		QLoaded: known(f.QLoaded), BandwidthHz: known(f.Bandwidth), MinSWR: known(f.MinSWR), Chi2: num(f.Chi2), Samples: f.Samples}
}

// acceptedJSON answers a request submitted: 202.
type acceptedJSON struct {
	RequestID   uint64                  `json:"request_id"`
	Kind        controller.Kind         `json:"kind"`
	State       controller.RequestState `json:"state"`
	FrequencyHz *json.Number            `json:"frequency_hz,omitempty"`
	Step        *int64                  `json:"step,omitempty"`
	// Cancelled and Replaced are the requests this one cancelled while they ran, and took the
	// place of while they waited, among those the service showed when it arrived.
	Cancelled []uint64 `json:"cancelled"`
	Replaced  []uint64 `json:"replaced"`
}

// pointJSON is a memory map point: the columns of memmap.ExportCSV.
type pointJSON struct {
	FrequencyHz  json.Number `json:"frequency_hz"`
	Position     int64       `json:"position"`
	Time         *time.Time  `json:"time"`
	TemperatureC *num        `json:"temperature_c"`
	SWR          *num        `json:"swr"`
	Q            *num        `json:"q"`
}

func pointOf(p memmap.Point) pointJSON {
	out := pointJSON{FrequencyHz: hz(p.Freq), Position: p.Pos, Time: timeOrNil(p.At), SWR: known(p.SWR), Q: known(p.Q)}
	if p.HasTemp {
		c := num(p.Temp.Celsius())
		out.TemperatureC = &c
	}
	return out
}

type pointsJSON struct {
	Count  int         `json:"count"`
	Points []pointJSON `json:"points"`
}

func pointsOf(pts []memmap.Point) pointsJSON {
	out := pointsJSON{Count: len(pts), Points: make([]pointJSON, len(pts))}
	for i, p := range pts {
		out.Points[i] = pointOf(p)
	}
	return out
}

// tuneEventJSON is the data of one of the tuner's events in the event stream.
type tuneEventJSON struct {
	Seq         uint64          `json:"seq"`
	At          time.Time       `json:"at"`
	RequestID   *uint64         `json:"request_id"`
	Kind        tune.Kind       `json:"kind"`
	State       tune.State      `json:"state,omitempty"`
	From        tune.State      `json:"from,omitempty"`
	FrequencyHz *json.Number    `json:"frequency_hz,omitempty"`
	Pos         *num            `json:"pos,omitempty"`
	Target      *int64          `json:"target,omitempty"`
	Speed       *num            `json:"speed,omitempty"`
	Stage       string          `json:"stage,omitempty"`
	Gamma2      *num            `json:"gamma2,omitempty"`
	SWR         *num            `json:"swr,omitempty"`
	ForwardW    *num            `json:"forward_w,omitempty"`
	Prediction  *predictionJSON `json:"prediction,omitempty"`
	Fit         *fitJSON        `json:"fit,omitempty"`
	Result      *resultJSON     `json:"result,omitempty"`
	Text        string          `json:"text,omitempty"`
}

func tuneEventOf(ev controller.Event) tuneEventJSON {
	e := ev.Tune
	out := tuneEventJSON{Seq: ev.Seq, At: e.At, RequestID: idOrNil(ev.Request), Kind: e.Kind, State: e.State,
		FrequencyHz: knownHz(e.Freq), Stage: e.Stage, Text: e.Text}
	if out.At.IsZero() {
		out.At = ev.At
	}
	pos := num(e.Pos)
	switch e.Kind {
	case tune.KindState:
		out.From = e.From
	case tune.KindMove:
		t := e.Target
		out.Pos, out.Target, out.Speed = &pos, &t, known(e.Speed)
	case tune.KindReading:
		g := num(e.Gamma2)
		out.Pos, out.Gamma2, out.SWR, out.ForwardW = &pos, &g, known(e.SWR), known(watts(e.Forward))
	case tune.KindPositioned, tune.KindDip:
		out.Pos = &pos
	case tune.KindResult:
		out.SWR = known(e.SWR)
	}
	out.Prediction, out.Fit, out.Result = mapPtr(e.Prediction, predictionOf), mapPtr(e.Fit, fitOf), mapPtr(e.Result, resultOf)
	return out
}

// requestEventJSON is the data of a request event in the event stream.
type requestEventJSON struct {
	Seq uint64 `json:"seq"`
	requestJSON
}

// gapJSON is the data of a gap event: events after After were lost to this stream, up to (not
// including) ResumesAt; 0 when nothing older than the live events is left.
type gapJSON struct {
	After     uint64 `json:"after"`
	ResumesAt uint64 `json:"resumes_at"`
	Reason    string `json:"reason"`
}

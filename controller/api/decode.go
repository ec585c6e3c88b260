package api

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"net/http"
	"slices"
	"strconv"
	"strings"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
)

// The request decoders: pure functions of a body, a path segment or a query value, so that they
// are table-tested and fuzzed apart from any I/O. Each failure is an *apiError naming the field:
// 400 for what is not even the right shape (not JSON, not an object, an unknown field, a string
// where a number belongs), 422 for a well-formed value the daemon cannot accept (a negative
// frequency, a missing field).

// maxHz bounds a frequency: 1 GHz, far above anything a magnetic loop tunes (they are HF
// antennas), and small enough that hertz convert to physic.Frequency's microhertz exactly.
const maxHz = 1e9

// maxWait bounds ?wait on a request: 20 s keeps a long poll well inside the usual 30 s write
// timeout of an HTTP server (common practice).
const maxWait = 20 * time.Second

// maxPointErrors is how many bad points an import reports before it stops listing them.
const maxPointErrors = 20

// apiError is an error the client is told of, as JSON: {"error": ..., "field": ..., "details": [...]}.
type apiError struct {
	Status  int      `json:"-"`
	Message string   `json:"error"`
	Field   string   `json:"field,omitempty"`
	Details []string `json:"details,omitempty"`
}

func (e *apiError) Error() string {
	if e.Field == "" {
		return e.Message
	}
	return e.Field + ": " + e.Message
}

func badRequest(field, format string, args ...any) *apiError {
	return &apiError{Status: http.StatusBadRequest, Field: field, Message: fmt.Sprintf(format, args...)}
}

func unprocessable(field, format string, args ...any) *apiError {
	return &apiError{Status: http.StatusUnprocessableEntity, Field: field, Message: fmt.Sprintf(format, args...)}
}

// decodeObject parses body as one JSON object whose keys are all among allowed, and returns its
// members; an empty body (or only white space) is the empty object. JSON null members are left
// out, as if absent.
func decodeObject(body []byte, where string, allowed ...string) (map[string]json.RawMessage, error) {
	body = bytes.TrimSpace(body)
	if len(body) == 0 {
		return map[string]json.RawMessage{}, nil
	}
	return decodeMembers(body, where, allowed...)
}

// decodeMembers parses raw, which must be a JSON object, as decodeObject does; where prefixes
// the field names in errors ("points[3]" for "points[3].position").
func decodeMembers(raw []byte, where string, allowed ...string) (map[string]json.RawMessage, error) {
	name := func(k string) string {
		if where == "" {
			return k
		}
		return where + "." + k
	}
	raw = bytes.TrimSpace(raw)
	if len(raw) == 0 || raw[0] != '{' {
		if !json.Valid(raw) {
			return nil, badRequest(where, "not valid JSON")
		}
		return nil, badRequest(where, "want a JSON object")
	}
	var m map[string]json.RawMessage
	if err := json.Unmarshal(raw, &m); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			return nil, badRequest(where, "not valid JSON at byte %d: %v", se.Offset, se)
		}
		return nil, badRequest(where, "not a JSON object: %v", err)
	}
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	slices.Sort(keys) // the same field named for the same body every time
	for _, k := range keys {
		if !slices.Contains(allowed, k) {
			if len(allowed) == 0 {
				return nil, badRequest(name(k), "unknown field: this request takes no body")
			}
			return nil, badRequest(name(k), "unknown field: want %s", strings.Join(allowed, ", "))
		}
		if string(m[k]) == "null" {
			delete(m, k)
		}
	}
	return m, nil
}

// isNumber says whether raw, valid JSON, is a number (not a string, a boolean, an array…).
func isNumber(raw json.RawMessage) bool {
	return len(raw) > 0 && (raw[0] == '-' || raw[0] >= '0' && raw[0] <= '9')
}

// decodeHz reads a frequency in hertz: a JSON number above 0 and at most maxHz, rounded to the
// microhertz.
func decodeHz(raw json.RawMessage, field string) (physic.Frequency, error) {
	if !isNumber(raw) {
		return 0, badRequest(field, "want a number of hertz, got %s", clip(raw))
	}
	v, err := strconv.ParseFloat(string(raw), 64)
	if err != nil && !errors.Is(err, strconv.ErrRange) {
		return 0, badRequest(field, "want a number of hertz, got %s", clip(raw))
	}
	return hzValue(v, field, string(raw))
}

// hzValue checks a frequency in hertz and converts it.
func hzValue(v float64, field, text string) (physic.Frequency, error) {
	if !(v > 0 && v <= maxHz) {
		return 0, unprocessable(field, "%s Hz: want more than 0, up to %g", clipString(text), maxHz)
	}
	f := physic.Frequency(math.Round(v * float64(physic.Hertz)))
	if f <= 0 {
		return 0, unprocessable(field, "%s Hz: want at least 1 µHz", clipString(text))
	}
	return f, nil
}

// decodeStep reads a motor position: a JSON number that is a whole number of steps.
func decodeStep(raw json.RawMessage, field string) (motion.Steps, error) {
	if !isNumber(raw) {
		return 0, badRequest(field, "want a whole number of steps, got %s", clip(raw))
	}
	v, err := strconv.ParseInt(string(raw), 10, 64)
	if err != nil {
		if errors.Is(err, strconv.ErrRange) {
			return 0, unprocessable(field, "%s: out of range", clip(raw))
		}
		return 0, unprocessable(field, "%s: want a whole number of steps", clip(raw))
	}
	return motion.Steps(v), nil
}

// decodeFreqBody reads {"hz": N}; ok is false when hz is absent (or null), which is an error
// if required.
func decodeFreqBody(body []byte, required bool) (f physic.Frequency, ok bool, err error) {
	m, err := decodeObject(body, "", "hz")
	if err != nil {
		return 0, false, err
	}
	raw, ok := m["hz"]
	if !ok {
		if required {
			return 0, false, unprocessable("hz", "missing: want the frequency in hertz")
		}
		return 0, false, nil
	}
	f, err = decodeHz(raw, "hz")
	return f, err == nil, err
}

// decodeStepBody reads {"step": N}, which must be there.
func decodeStepBody(body []byte) (motion.Steps, error) {
	m, err := decodeObject(body, "", "step")
	if err != nil {
		return 0, err
	}
	raw, ok := m["step"]
	if !ok {
		return 0, unprocessable("step", "missing: want the motor position in steps")
	}
	return decodeStep(raw, "step")
}

// decodeEmptyBody accepts an empty body or an empty object.
func decodeEmptyBody(body []byte) error {
	_, err := decodeObject(body, "")
	return err
}

// The members of a point in JSON: the CSV columns of memmap.ExportCSV.
var pointFields = []string{"frequency_hz", "position", "time", "temperature_c", "swr", "q"}

// decodePoints reads {"points": [{"frequency_hz": …, "position": …, "time": …,
// "temperature_c": …, "swr": …, "q": …}, …]}: every bad point is reported (up to
// maxPointErrors), with the field of the first.
func decodePoints(body []byte) ([]memmap.Point, error) {
	m, err := decodeObject(body, "", "points")
	if err != nil {
		return nil, err
	}
	raw, ok := m["points"]
	if !ok {
		return nil, unprocessable("points", "missing: want a list of points (an empty list forgets them all)")
	}
	var items []json.RawMessage
	if raw[0] != '[' || json.Unmarshal(raw, &items) != nil {
		return nil, badRequest("points", "want a list of points, got %s", clip(raw))
	}
	if len(items) > controller.MaxImportPoints {
		return nil, unprocessable("points", "%d points: want at most %d", len(items), controller.MaxImportPoints)
	}
	pts := make([]memmap.Point, 0, len(items))
	var bad *apiError
	for i, item := range items {
		p, err := decodePoint(item, fmt.Sprintf("points[%d]", i))
		if err == nil {
			pts = append(pts, p)
			continue
		}
		var ae *apiError
		errors.As(err, &ae)
		if bad == nil {
			bad = &apiError{Status: ae.Status, Field: ae.Field, Message: "bad points: nothing imported"}
		}
		if ae.Status == http.StatusBadRequest {
			bad.Status = http.StatusBadRequest // a malformed point outranks a bad value
		}
		if len(bad.Details) == maxPointErrors {
			bad.Details = append(bad.Details, "too many bad points, stopped reading")
			break
		}
		bad.Details = append(bad.Details, ae.Error())
	}
	if bad != nil {
		return nil, bad
	}
	return pts, nil
}

// decodePoint reads one point; where names it in errors.
func decodePoint(raw json.RawMessage, where string) (memmap.Point, error) {
	m, err := decodeMembers(raw, where, pointFields...)
	if err != nil {
		return memmap.Point{}, err
	}
	field := func(k string) string { return where + "." + k }
	var p memmap.Point
	fr, ok := m["frequency_hz"]
	if !ok {
		return p, unprocessable(field("frequency_hz"), "missing")
	}
	if p.Freq, err = decodeHz(fr, field("frequency_hz")); err != nil {
		return p, err
	}
	pr, ok := m["position"]
	if !ok {
		return p, unprocessable(field("position"), "missing")
	}
	if p.Pos, err = decodeStep(pr, field("position")); err != nil {
		return p, err
	}
	if tr, ok := m["time"]; ok {
		var s string
		if tr[0] != '"' || json.Unmarshal(tr, &s) != nil {
			return p, badRequest(field("time"), "want an RFC 3339 time as a string, got %s", clip(tr))
		}
		if p.At, err = time.Parse(time.RFC3339Nano, s); err != nil {
			return p, unprocessable(field("time"), "%q: want an RFC 3339 time", clipString(s))
		}
	}
	if cr, ok := m["temperature_c"]; ok {
		c, err := decodeFloat(cr, field("temperature_c"))
		if err != nil {
			return p, err
		}
		// Below absolute zero is refused by the map; far above is no loop's weather.
		if !(c >= -273.15 && c <= 1000) {
			return p, unprocessable(field("temperature_c"), "%g °C: want −273.15 to 1000", c)
		}
		p.Temp, p.HasTemp = physic.ZeroCelsius+physic.Temperature(math.Round(c*float64(physic.Kelvin))), true
	}
	if sr, ok := m["swr"]; ok {
		if p.SWR, err = decodeFloat(sr, field("swr")); err != nil {
			return p, err
		}
	}
	if qr, ok := m["q"]; ok {
		if p.Q, err = decodeFloat(qr, field("q")); err != nil {
			return p, err
		}
	}
	return p, nil
}

// decodeFloat reads a finite JSON number.
func decodeFloat(raw json.RawMessage, field string) (float64, error) {
	if !isNumber(raw) {
		return 0, badRequest(field, "want a number, got %s", clip(raw))
	}
	v, err := strconv.ParseFloat(string(raw), 64)
	if err != nil {
		return 0, unprocessable(field, "%s: out of range", clip(raw))
	}
	return v, nil
}

// parseHzPath reads a frequency in hertz from a path segment: digits, optionally a point and
// more digits.
func parseHzPath(s string) (physic.Frequency, error) {
	whole, frac, _ := strings.Cut(s, ".")
	if whole == "" || !digits(whole) || strings.Contains(s, ".") && (frac == "" || !digits(frac)) {
		return 0, badRequest("hz", "%q: want a frequency in hertz (digits, optionally a point and more digits)", clipString(s))
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, unprocessable("hz", "%q: out of range", clipString(s))
	}
	return hzValue(v, "hz", s)
}

func digits(s string) bool {
	for i := range len(s) {
		if s[i] < '0' || s[i] > '9' {
			return false
		}
	}
	return true
}

// parseRequestID reads a request ID from a path segment: a decimal above 0.
func parseRequestID(s string) (controller.RequestID, error) {
	v, err := strconv.ParseUint(s, 10, 64)
	if err != nil || v == 0 {
		return 0, badRequest("id", "%q: want a request ID (a whole number above 0)", clipString(s))
	}
	return controller.RequestID(v), nil
}

// parseWait reads ?wait: a Go duration ("5s", "1500ms") or whole seconds ("5"), above 0 and at
// most maxWait. Empty: no waiting.
func parseWait(s string) (time.Duration, error) {
	if s == "" {
		return 0, nil
	}
	d, err := time.ParseDuration(s)
	if err != nil {
		n, nerr := strconv.ParseUint(s, 10, 32)
		if nerr != nil {
			return 0, badRequest("wait", "%q: want a duration such as 5s or 1500ms", clipString(s))
		}
		d = time.Duration(n) * time.Second
	}
	if d <= 0 || d > maxWait {
		return 0, unprocessable("wait", "%s: want more than 0, up to %s", clipString(s), maxWait)
	}
	return d, nil
}

// parseSeq reads an event number (Last-Event-ID, ?since): a decimal, 0 for "from the start of
// the backlog".
func parseSeq(s, field string) (uint64, error) {
	v, err := strconv.ParseUint(strings.TrimSpace(s), 10, 64)
	if err != nil {
		return 0, badRequest(field, "%q: want an event number", clipString(s))
	}
	return v, nil
}

// clip shortens a value quoted in an error: a client's huge body is not echoed back whole.
func clip(raw []byte) string { return clipString(string(raw)) }

func clipString(s string) string {
	const most = 40
	if len(s) <= most {
		return s
	}
	return strings.ToValidUTF8(s[:most], "") + "…"
}

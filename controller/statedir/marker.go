package statedir

import (
	"errors"
	"fmt"
	"io/fs"
	"strconv"
	"strings"
	"time"

	"github.com/tankd/tankd/controller/store"
)

// Marker records a clean stop: that the daemon stopped the motor and saw it stand before it
// exited, and where.
type Marker struct {
	// Position is where the motor stood, in microsteps (motion.Steps).
	Position int64
	// Trusted says whether the daemon trusted Position when it stopped: false if the axis had
	// never been referenced, or had faulted since, and the position is only a count.
	Trusted bool
	// At is when the daemon stopped. It is stored in UTC, to the nanosecond, and must fall in
	// the years 0 to 9999, as RFC 3339 can say.
	At time.Time
	// Reason says why the daemon stopped ("SIGTERM", say), for the log; it may be empty, and
	// is at most MaxReasonLen bytes.
	Reason string
}

// MaxReasonLen bounds Marker.Reason: a line for a log, not a report.
const MaxReasonLen = 256

// markerHeader is the marker file's first line: its signature and the one version this build
// reads and writes.
const (
	markerMagic   = "tankd-clean-stop"
	markerVersion = 1
)

// Errors of ParseMarker, for errors.Is.
var (
	// ErrMarkerFormat is wrapped by every error about a marker that is not one: damaged,
	// edited, or not a marker at all. It wraps store.ErrCorrupt, as store.Decode wants of a
	// parser.
	ErrMarkerFormat = fmt.Errorf("clean-stop marker: %w", store.ErrCorrupt)
	// ErrMarkerVersion: the marker has the signature but a version this build does not read,
	// written by a newer daemon, say.
	ErrMarkerVersion = errors.New("clean-stop marker of another version")
)

// WriteMarker records a clean stop, atomically and durably (see controller/store): when it
// returns nil, the marker is on the device. It is the daemon's last write before it exits,
// after the motor has stopped.
func (d *Dir) WriteMarker(m Marker) error {
	if err := d.checkOpen(); err != nil {
		return fmt.Errorf("statedir: write clean-stop marker: %w", err)
	}
	body, err := encodeMarker(m)
	if err != nil {
		return fmt.Errorf("statedir: write clean-stop marker: %w", err)
	}
	if err := store.WriteFile(d.MarkerPath(), body); err != nil {
		return fmt.Errorf("statedir: write clean-stop marker: %w", err)
	}
	return nil
}

// TakeMarker reads the clean-stop marker and removes it, durably, so that whatever happens
// later in this run, the next start does not find it. ok is true only if there was a good
// marker and it is gone: then the last run stopped cleanly, as m says. With no marker (a first
// run, or a crash) it returns the zero Marker, false and nil. A marker that cannot be used
// (damaged, of another version, unreadable, or only its previous copy good, which speaks of an
// earlier stop) counts as no marker: TakeMarker removes it and returns the zero Marker, false
// and an error saying what was wrong, for the log. If the marker cannot be removed, ok is false
// too: a marker left behind could make a later crash look like a clean stop. Should the process
// die inside TakeMarker, the marker may survive; that is right, as nothing has moved the motor.
func (d *Dir) TakeMarker() (m Marker, ok bool, err error) {
	if err := d.checkOpen(); err != nil {
		return Marker{}, false, fmt.Errorf("statedir: take clean-stop marker: %w", err)
	}
	path := d.MarkerPath()
	m, err = store.Decode(path, ParseMarker)
	if errors.Is(err, fs.ErrNotExist) {
		return Marker{}, false, nil
	}
	if err != nil {
		if rerr := store.Remove(path); rerr != nil {
			err = errors.Join(err, rerr)
		}
		return Marker{}, false, fmt.Errorf("statedir: clean-stop marker unusable, so the last stop counts as a crash: %w", err)
	}
	if err := store.Remove(path); err != nil {
		return Marker{}, false, fmt.Errorf("statedir: clean-stop marker found but not removed, so not trusted: %w", err)
	}
	return m, true, nil
}

// encodeMarker writes m in the marker format, all but the checksum line.
func encodeMarker(m Marker) ([]byte, error) {
	if y := m.At.UTC().Year(); y < 0 || y > 9999 {
		return nil, fmt.Errorf("time %v: want a year from 0 to 9999", m.At)
	}
	if len(m.Reason) > MaxReasonLen {
		return nil, fmt.Errorf("reason of %d bytes: want at most %d", len(m.Reason), MaxReasonLen)
	}
	b := fmt.Appendf(nil, "%s %d\nposition=%d trusted=%t at=%s\n",
		markerMagic, markerVersion, m.Position, m.Trusted, m.At.UTC().Format(time.RFC3339Nano))
	if m.Reason != "" {
		b = append(b, "reason="...)
		b = strconv.AppendQuote(b, m.Reason)
		b = append(b, '\n')
	}
	return b, nil
}

// ParseMarker parses the body of a marker file, its checksum line removed. Errors wrap
// ErrMarkerFormat or ErrMarkerVersion.
func ParseMarker(body []byte) (Marker, error) {
	s := string(body)
	if !strings.HasSuffix(s, "\n") {
		return Marker{}, fmt.Errorf("%w: no final newline", ErrMarkerFormat)
	}
	lines := strings.Split(strings.TrimSuffix(s, "\n"), "\n")
	if err := parseMarkerHeader(lines[0]); err != nil {
		return Marker{}, err
	}
	if len(lines) < 2 || len(lines) > 3 {
		return Marker{}, fmt.Errorf("%w: %d lines, want the header, a data line and an optional reason", ErrMarkerFormat, len(lines))
	}
	m, err := parseMarkerData(lines[1])
	if err != nil {
		return Marker{}, err
	}
	if len(lines) == 3 {
		q, ok := strings.CutPrefix(lines[2], "reason=")
		if !ok || !strings.HasPrefix(q, `"`) {
			return Marker{}, fmt.Errorf("%w: line 3: want reason=\"…\"", ErrMarkerFormat)
		}
		r, err := strconv.Unquote(q)
		if err != nil {
			return Marker{}, fmt.Errorf("%w: line 3: reason %.40s: not a quoted string", ErrMarkerFormat, q)
		}
		if len(r) > MaxReasonLen {
			return Marker{}, fmt.Errorf("%w: line 3: reason of %d bytes: want at most %d", ErrMarkerFormat, len(r), MaxReasonLen)
		}
		m.Reason = r
	}
	return m, nil
}

func parseMarkerHeader(line string) error {
	magic, v, _ := strings.Cut(line, " ")
	if magic != markerMagic {
		return fmt.Errorf("%w: line 1: %.40q: want %q", ErrMarkerFormat, line, fmt.Sprintf("%s %d", markerMagic, markerVersion))
	}
	n, err := strconv.Atoi(v)
	switch {
	case err != nil || n < 1:
		return fmt.Errorf("%w: line 1: version %.20q: want a positive integer", ErrMarkerFormat, v)
	case n != markerVersion:
		return fmt.Errorf("%w: version %d; this build reads version %d", ErrMarkerVersion, n, markerVersion)
	}
	return nil
}

func parseMarkerData(line string) (Marker, error) {
	var m Marker
	seen := map[string]bool{}
	for _, f := range strings.Split(line, " ") {
		k, v, ok := strings.Cut(f, "=")
		if !ok || seen[k] {
			return Marker{}, fmt.Errorf("%w: line 2: field %.40q", ErrMarkerFormat, f)
		}
		seen[k] = true
		switch k {
		case "position":
			n, err := strconv.ParseInt(v, 10, 64)
			if err != nil {
				return Marker{}, fmt.Errorf("%w: line 2: position %.40q: want a whole number of steps", ErrMarkerFormat, v)
			}
			m.Position = n
		case "trusted":
			switch v {
			case "true":
				m.Trusted = true
			case "false":
			default:
				return Marker{}, fmt.Errorf("%w: line 2: trusted %.40q: want true or false", ErrMarkerFormat, v)
			}
		case "at":
			t, err := time.Parse(time.RFC3339Nano, v)
			if err != nil {
				return Marker{}, fmt.Errorf("%w: line 2: at %.40q: want an RFC 3339 time", ErrMarkerFormat, v)
			}
			// An offset can carry a time written in the year 0 or 9999 outside them in UTC.
			if y := t.UTC().Year(); y < 0 || y > 9999 {
				return Marker{}, fmt.Errorf("%w: line 2: at %.40q: want a year from 0 to 9999 in UTC", ErrMarkerFormat, v)
			}
			m.At = t.UTC()
		default:
			return Marker{}, fmt.Errorf("%w: line 2: unknown field %.40q", ErrMarkerFormat, k)
		}
	}
	if !seen["position"] || !seen["trusted"] || !seen["at"] {
		return Marker{}, fmt.Errorf("%w: line 2: want position, trusted and at", ErrMarkerFormat)
	}
	return m, nil
}

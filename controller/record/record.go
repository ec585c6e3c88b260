package record

import (
	"errors"
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

// Version is the format version this package reads and writes.
const Version = 1

// signature opens every recording, followed by the version.
const signature = "tankd-sweep"

// columns is the fixed column line of version 1.
var columns = [...]string{"t_s", "step", "dir", "freq_hz", "fwd_w", "ref_w", "swr"}

// keyStart is the metadata key that carries Header.Start; it never appears in Header.Meta.
const keyStart = "start"

// Errors for errors.Is.
var (
	// ErrVersion: the recording has a version this package does not read.
	ErrVersion = errors.New("unsupported version")
	// ErrInvalid: a header or sample holds a value the format cannot carry (a negative power, a
	// time running backwards, an SWR below 1...).
	ErrInvalid = errors.New("invalid value")
)

// Sample is one reading of the directional coupler during a sweep.
type Sample struct {
	T         time.Duration    // since Header.Start
	Step      motion.Steps     // motor position
	Dir       motion.Direction // direction of the most recent travel
	Freq      physic.Frequency // operating frequency
	Forward   physic.Power
	Reflected physic.Power
	SWR       float64 // as the recorder computed it; NaN without forward power
}

// Header is what a recording says about itself.
type Header struct {
	// Version is the format version; Writer accepts 0 as "the current one".
	Version int
	// Start is the instant sample times count from. It is required.
	Start time.Time
	// Meta holds free key=value metadata (source, seed, loop...). Keys follow the rules in the
	// package doc; "start" is reserved for Start. It is written sorted by key.
	Meta map[string]string
}

// ParseError reports a malformed recording and the line where it went wrong.
type ParseError struct {
	Line int // 1-based
	Err  error
}

func (e *ParseError) Error() string { return fmt.Sprintf("record: line %d: %v", e.Line, e.Err) }

// Unwrap gives errors.Is and errors.As the cause.
func (e *ParseError) Unwrap() error { return e.Err }

// check reports why s cannot be stored, given the time of the sample before it (prev < 0 when
// there was none).
func (s *Sample) check(prev time.Duration) error {
	switch {
	case s.T < 0:
		return fmt.Errorf("time %v is negative: %w", s.T, ErrInvalid)
	case s.T < prev:
		return fmt.Errorf("time %v is before the previous sample's %v: %w", s.T, prev, ErrInvalid)
	case s.Dir != motion.Up && s.Dir != motion.Down:
		return fmt.Errorf("direction %d is neither up (+1) nor down (-1): %w", s.Dir, ErrInvalid)
	case s.Freq < 0:
		return fmt.Errorf("frequency %v is negative: %w", s.Freq, ErrInvalid)
	case s.Forward < 0:
		return fmt.Errorf("forward power %v is negative: %w", s.Forward, ErrInvalid)
	case s.Reflected < 0:
		return fmt.Errorf("reflected power %v is negative: %w", s.Reflected, ErrInvalid)
	case !(s.SWR >= 1) && !math.IsNaN(s.SWR):
		return fmt.Errorf("swr %v is below 1: %w", s.SWR, ErrInvalid)
	}
	return nil
}

// validKey reports whether k may be a metadata key.
func validKey(k string) bool {
	if k == "" || !isLetter(k[0]) {
		return false
	}
	for i := 1; i < len(k); i++ {
		c := k[i]
		if !isLetter(c) && !('0' <= c && c <= '9') && c != '_' && c != '.' && c != '-' {
			return false
		}
	}
	return true
}

func isLetter(c byte) bool { return 'a' <= c && c <= 'z' || 'A' <= c && c <= 'Z' }

package tune

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/store"
)

// Calibration is a stored backlash measurement.
type Calibration struct {
	Backlash motion.Steps
	At       time.Time        // when it was measured
	Freq     physic.Frequency // where
}

// calibrationHeader is the first line of a calibration file:
//
//	tankd-calibration 1
//	backlash=49 freq=3504000 at=2026-01-01T12:00:00Z
//	sha256 <hex>               (added by controller/store)
const calibrationHeader = "tankd-calibration 1"

// ErrCalibrationFormat is wrapped by every error about a calibration file's content.
var ErrCalibrationFormat = errors.New("calibration file")

// SaveCalibration writes c to path crash-safely (see controller/store).
func SaveCalibration(path string, c Calibration) error {
	var b bytes.Buffer
	fmt.Fprintln(&b, calibrationHeader)
	fmt.Fprintf(&b, "backlash=%d freq=%d at=%s\n", c.Backlash, c.Freq/physic.Hertz, c.At.UTC().Format(time.RFC3339Nano))
	if err := store.WriteFile(path, b.Bytes()); err != nil {
		return fmt.Errorf("save calibration: %w", err)
	}
	return nil
}

// LoadCalibration reads a calibration saved by SaveCalibration. A file that had to be taken
// from the previous copy is returned with an error wrapping store.ErrUsedPrevious; one whose
// copies are all damaged (torn, or not a calibration) gives an error wrapping store.ErrCorrupt,
// and a missing one fs.ErrNotExist.
func LoadCalibration(path string) (Calibration, error) {
	c, err := store.Decode(path, func(body []byte) (Calibration, error) {
		c, err := ParseCalibration(body)
		if err != nil {
			return c, fmt.Errorf("%w: %w", store.ErrCorrupt, err)
		}
		return c, nil
	})
	if err != nil {
		return c, fmt.Errorf("load calibration: %w", err)
	}
	return c, nil
}

// ParseCalibration parses the body of a calibration file.
func ParseCalibration(body []byte) (Calibration, error) {
	sc := bufio.NewScanner(bytes.NewReader(body))
	var lines []string
	for sc.Scan() {
		lines = append(lines, strings.TrimRight(sc.Text(), "\r"))
	}
	if len(lines) != 2 || lines[0] != calibrationHeader {
		return Calibration{}, fmt.Errorf("%w: want the line %q and one data line", ErrCalibrationFormat, calibrationHeader)
	}
	var c Calibration
	seen := map[string]bool{}
	for _, f := range strings.Fields(lines[1]) {
		k, v, ok := strings.Cut(f, "=")
		if !ok || seen[k] {
			return Calibration{}, fmt.Errorf("%w: line 2: field %q", ErrCalibrationFormat, f)
		}
		seen[k] = true
		switch k {
		case "backlash":
			n, err := strconv.ParseInt(v, 10, 64)
			if err != nil || n < 0 || n > 100000 {
				return Calibration{}, fmt.Errorf("%w: line 2: backlash %q: want 0 to 100000 steps", ErrCalibrationFormat, v)
			}
			c.Backlash = n
		case "freq":
			n, err := strconv.ParseInt(v, 10, 64)
			if err != nil || n <= 0 || n > 1e10 {
				return Calibration{}, fmt.Errorf("%w: line 2: freq %q: want a frequency in Hz", ErrCalibrationFormat, v)
			}
			c.Freq = physic.Frequency(n) * physic.Hertz
		case "at":
			t, err := time.Parse(time.RFC3339Nano, v)
			if err != nil {
				return Calibration{}, fmt.Errorf("%w: line 2: at %q: want an RFC 3339 time", ErrCalibrationFormat, v)
			}
			c.At = t
		default:
			return Calibration{}, fmt.Errorf("%w: line 2: unknown field %q", ErrCalibrationFormat, k)
		}
	}
	if !seen["backlash"] || !seen["freq"] || !seen["at"] {
		return Calibration{}, fmt.Errorf("%w: line 2: want backlash, freq and at", ErrCalibrationFormat)
	}
	return c, nil
}

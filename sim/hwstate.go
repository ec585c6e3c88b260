package sim

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"strconv"
	"strings"

	"github.com/tankd/tankd/controller/store"
)

// hardwareHeader is the first line of a simulated hardware state file:
//
//	tankd-sim-hardware 1
//	motor=12345 shaft=12325.5
//	sha256 <hex>               (added by controller/store)
//
// motor is the rotor's position in microsteps, shaft the capacitor shaft's, as the simulator
// counts them (the truth, which the controller does not know).
const hardwareHeader = "tankd-sim-hardware 1"

// SaveHardware keeps where the simulated motor and capacitor shaft stand, so that a daemon
// started again on the simulator finds its capacitor where it left it, as it would find a real
// one. It is written crash-safely (see controller/store). Call it with the motor at rest.
func (st *Station) SaveHardware(path string) error {
	var b bytes.Buffer
	fmt.Fprintln(&b, hardwareHeader)
	fmt.Fprintf(&b, "motor=%d shaft=%s\n", st.Mech.MotorPosition(), strconv.FormatFloat(st.Mech.Shaft(), 'g', -1, 64))
	if err := store.WriteFile(path, b.Bytes()); err != nil {
		return fmt.Errorf("save simulated hardware: %w", err)
	}
	return nil
}

// LoadHardware puts the simulated motor and shaft where SaveHardware found them. A missing file
// gives an error wrapping fs.ErrNotExist (a first start: the station stays as built).
func (st *Station) LoadHardware(path string) error {
	h, err := store.Decode(path, parseHardware)
	if err != nil && !errors.Is(err, store.ErrUsedPrevious) {
		return fmt.Errorf("load simulated hardware: %w", err)
	}
	if rerr := st.Mech.Restore(h.motor, h.shaft); rerr != nil {
		return fmt.Errorf("load simulated hardware: %w", rerr)
	}
	return err
}

type hardwareState struct {
	motor int64
	shaft float64
}

func parseHardware(body []byte) (hardwareState, error) {
	sc := bufio.NewScanner(bytes.NewReader(body))
	var lines []string
	for sc.Scan() {
		lines = append(lines, sc.Text())
	}
	if len(lines) != 2 || lines[0] != hardwareHeader {
		return hardwareState{}, fmt.Errorf("%w: not a simulated hardware state", store.ErrCorrupt)
	}
	var motor int64
	var shaft float64
	seen := 0
	for _, f := range strings.Fields(lines[1]) {
		k, v, _ := strings.Cut(f, "=")
		var err error
		switch k {
		case "motor":
			motor, err = strconv.ParseInt(v, 10, 64)
		case "shaft":
			shaft, err = strconv.ParseFloat(v, 64)
		default:
			err = errors.New("unknown field")
		}
		if err != nil {
			return hardwareState{}, fmt.Errorf("%w: field %q: %v", store.ErrCorrupt, f, err)
		}
		seen++
	}
	if seen != 2 {
		return hardwareState{}, fmt.Errorf("%w: want motor and shaft", store.ErrCorrupt)
	}
	return hardwareState{motor: motor, shaft: shaft}, nil
}

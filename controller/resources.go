package controller

import (
	"context"
	"errors"
	"fmt"
	"io"
	"reflect"
	"time"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/tune"
)

// Resources are what the controller needs from a backend, resolved: the simulator builds them
// now, the hardware drivers build them from the configuration's pins and buses. Only cmd/
// turns names into resources; the controller never imports a driver or the simulator.
type Resources struct {
	Clock       clock.Clock
	Drive       motion.Drive
	Switches    motion.Switches      // each may be nil
	Sensor      sense.Sensor         // the coupler's two detectors, calibrated
	Transmitter tune.Transmitter     // nil: the daemon cannot key; an operator gives the carrier
	Thermometer tune.Thermometer     // nil: the loop's temperature is not known
	Frequency   tune.FrequencySource // nil: the Transmitter's, if it says, else none
	// Others are further resources the backend opened (a CAT link, a TX-inhibit line, a bus),
	// halted and closed with the rest.
	Others []any
}

// Resource is something that can be made inert at once (periph's conn.Resource convention).
type Resource interface {
	String() string
	Halt() error
}

// validate reports the resources a controller cannot run without.
func (r Resources) validate() error {
	var errs []error
	if r.Clock == nil {
		errs = append(errs, errors.New("no clock"))
	}
	if r.Drive == nil {
		errs = append(errs, errors.New("no drive"))
	}
	if r.Sensor == nil {
		errs = append(errs, errors.New("no sensor"))
	}
	if len(errs) > 0 {
		return fmt.Errorf("resources: %w", errors.Join(errs...))
	}
	return nil
}

// unkeyTimeout bounds the unkey Halt sends to a transmitter that has no Halt of its own.
const unkeyTimeout = 2 * time.Second

// Halt makes every resource safe, in order of danger: the transmitter first (its Halt, or an
// unkey), then the drive (stopped and released), then the rest. It halts them all whatever
// fails, and returns every failure.
func (r Resources) Halt() error {
	var errs []error
	if r.Transmitter != nil {
		if h, ok := r.Transmitter.(interface{ Halt() error }); ok {
			errs = append(errs, h.Halt())
		} else {
			ctx, cancel := context.WithTimeout(context.Background(), unkeyTimeout)
			errs = append(errs, r.Transmitter.Unkey(ctx))
			cancel()
		}
	}
	if r.Drive != nil {
		errs = append(errs, r.Drive.Halt())
	}
	done := []any{r.Transmitter, r.Drive}
	for _, x := range r.rest() {
		if h, ok := x.(interface{ Halt() error }); ok && !among(x, done) {
			done = append(done, x)
			errs = append(errs, h.Halt())
		}
	}
	return errors.Join(errs...)
}

// among says whether x is one of the resources in list: the same pointer (a simulated station
// is several resources at once, and is halted once). Values that are not pointers are never
// taken for one another.
func among(x any, list []any) bool {
	vx := reflect.ValueOf(x)
	if vx.Kind() != reflect.Pointer {
		return false
	}
	for _, y := range list {
		if vy := reflect.ValueOf(y); vy.Kind() == reflect.Pointer && vy.Pointer() == vx.Pointer() && vy.Type() == vx.Type() {
			return true
		}
	}
	return false
}

// Close releases every resource that holds something (a file, a bus), each once, after
// halting them all. Nothing may use the resources after.
func (r Resources) Close() error {
	errs := []error{r.Halt()}
	var done []any
	for _, x := range append([]any{r.Transmitter, r.Drive}, r.rest()...) {
		if c, ok := x.(io.Closer); ok && x != nil && !among(x, done) {
			done = append(done, x)
			errs = append(errs, c.Close())
		}
	}
	return errors.Join(errs...)
}

// rest lists the resources other than the transmitter and the drive.
func (r Resources) rest() []any {
	out := []any{r.Sensor, r.Thermometer, r.Frequency}
	for _, s := range []motion.Switch{r.Switches.Home, r.Switches.Lower, r.Switches.Upper} {
		if s != nil {
			out = append(out, s)
		}
	}
	out = append(out, r.Others...)
	var keep []any
	for _, x := range out {
		if x != nil {
			keep = append(keep, x)
		}
	}
	return keep
}

package main

import (
	"errors"
	"fmt"
	"io"

	"github.com/tankd/tankd/controller/config"
	"github.com/tankd/tankd/sim"
)

// fileConfig is the daemon's configuration file: the controller's sections and, for the
// simulator backend, the simulator's own ([simulator]: how the simulated station really behaves,
// which a real installation has no use for).
type fileConfig struct {
	config.Config
	Simulator sim.Simulator `toml:"simulator"`
}

// defaultFile is the configuration a file is read on top of: real hardware, no transmitting,
// the demo station's description; embedded is what runs with no file at all: the simulator,
// whose imaginary radio the daemon may key so that its demo tunes.
func defaultFile(embedded bool) fileConfig {
	c := config.Default()
	if embedded {
		c = config.Embedded()
	}
	return fileConfig{Config: c, Simulator: sim.DefaultSpec().Simulator}
}

// loadConfig reads the configuration at path (none: the embedded default) and validates all of
// it, reporting every problem at once.
func loadConfig(path string) (fileConfig, error) {
	c := defaultFile(path == "")
	if path != "" {
		if err := config.DecodeFile(path, &c); err != nil {
			return c, err
		}
	}
	return c, c.validate()
}

// validate checks the whole configuration, the simulator's section too when it is the backend.
func (c fileConfig) validate() error {
	errs := []error{c.Config.Validate()}
	if c.Hardware.Backend == config.BackendSim {
		if err := c.spec().Validate(); err != nil {
			// the description's problems are Config.Validate's already; keep the simulator's
			for _, e := range unjoin(err) {
				if isSimulatorKey(e.Error()) {
					errs = append(errs, e)
				}
			}
		}
	}
	return errors.Join(errs...)
}

func unjoin(err error) []error {
	if j, ok := err.(interface{ Unwrap() []error }); ok {
		return j.Unwrap()
	}
	return []error{err}
}

func isSimulatorKey(msg string) bool { return len(msg) > 10 && msg[:10] == "simulator." }

// spec is the simulated station: the configured description, simulated as the [simulator]
// section says.
func (c fileConfig) spec() sim.Spec {
	return sim.Spec{Description: c.Station, Simulator: c.Simulator}
}

// printConfig writes the effective configuration, every default written out, in a form -config
// reads back unchanged.
func printConfig(w io.Writer, c fileConfig) error {
	if err := config.Encode(w, c); err != nil {
		return fmt.Errorf("print the configuration: %w", err)
	}
	return nil
}

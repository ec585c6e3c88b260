package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"math"
	"path/filepath"
	"sync"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/config"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/radio"
)

// simHardwareFile is where the simulated motor and capacitor keep their state between runs, in
// the state directory beside the daemon's own files (the simulator's, not the daemon's: the
// controller never reads it).
const simHardwareFile = "simulated-hardware"

// simBackend is the built-in simulator as the daemon's hardware.
type simBackend struct {
	station *sim.Station
	path    string // of the simulated hardware's state
	log     *slog.Logger
	lastHW  int64  // the motor position last saved
	cat     string // the simulated radio's CAT pseudo-terminal, once served
}

// openSim builds the simulated station the configuration describes, where the last run left
// its capacitor (a real one stays where it was left).
func openSim(cfg fileConfig, clk clock.Clock, dir *statedir.Dir, log *slog.Logger) (*simBackend, error) {
	st, err := sim.NewStation(cfg.spec(), clk)
	if err != nil {
		return nil, err
	}
	b := &simBackend{station: st, path: filepath.Join(dir.Path(), simHardwareFile), log: log, lastHW: math.MinInt64}
	switch err := st.LoadHardware(b.path); {
	case err == nil:
		b.lastHW = st.Mech.MotorPosition()
	case errors.Is(err, fs.ErrNotExist):
		log.Info("simulated hardware: first start, the capacitor stands where the station description leaves it")
	default:
		log.Warn("simulated hardware state unreadable: starting it afresh", "err", err)
	}
	log.Warn("simulated station: the RF here is imaginary, but a real loop carries kilovolts; read the safety notes in README.md")
	return b, nil
}

// resources are the simulated station's parts as the controller takes them.
func (b *simBackend) resources() controller.Resources {
	st := b.station
	return controller.Resources{Clock: st.Clock, Drive: st.Mech, Switches: st.Mech.Switches(), Sensor: st.Sensor(),
		Transmitter: st.Radio, Thermometer: st.Thermometer(), Frequency: st.Radio}
}

// afterOperationHook saves the simulated hardware's state after every operation, with the motor
// at rest, only when it moved (SD cards wear); nil without a simulator.
func (b *simBackend) afterOperationHook() func(controller.RequestStatus) {
	if b == nil {
		return nil
	}
	return func(controller.RequestStatus) { b.save() }
}

// save keeps where the simulated motor and shaft stand, if the motor moved since the last save.
func (b *simBackend) save() {
	p := b.station.Mech.MotorPosition()
	if p == b.lastHW {
		return
	}
	if err := b.station.SaveHardware(b.path); err != nil {
		b.log.Warn("simulated hardware state not saved", "err", err)
		return
	}
	b.lastHW = p
}

// serveRadio serves the simulated radio's CAT link on a pseudo-terminal in the configured
// dialect until ctx ends, and returns its frequency reports: every change, for the follower.
func (b *simBackend) serveRadio(ctx context.Context, rc config.Radio, wg *sync.WaitGroup) (<-chan physic.Frequency, error) {
	st := b.station
	if rc.Port != "" {
		return nil, fmt.Errorf("radio.port %q: the simulated radio serves its own pseudo-terminal; leave the port empty", rc.Port)
	}
	pt, path, err := radio.OpenPTY()
	if err != nil {
		return nil, err
	}
	try := fmt.Sprintf("printf 'FA00003700000;' > %s", path)
	serve := func(ctx context.Context, link io.ReadWriter) error {
		return st.Radio.ServeASCII(ctx, link, radio.ASCIIOpts{})
	}
	if rc.Dialect == config.DialectBinary {
		try = "a binary-dialect CAT program on " + path
		serve = func(ctx context.Context, link io.ReadWriter) error {
			return st.Radio.ServeBinary(ctx, link, radio.BinaryOpts{Addr: byte(rc.Address)})
		}
	}
	b.cat = path
	b.log.Info("simulated radio", "cat", path, "dialect", rc.Dialect, "try", try)
	sub := st.Radio.Subscribe(16)
	reports := make(chan physic.Frequency, 16)
	wg.Add(2)
	go func() {
		defer wg.Done()
		defer pt.Close()
		if err := serve(ctx, pt); err != nil && !errors.Is(err, context.Canceled) {
			b.log.Error("simulated CAT link", "err", err)
		}
	}()
	go func() {
		defer wg.Done()
		defer sub.Close()
		last := st.Radio.Frequency()
		for {
			select {
			case <-ctx.Done():
				return
			case ev := <-sub.Events():
				// the tuner's own carrier does not move the VFO; a change is the operator's
				if f := ev.State.Frequency(); f != last {
					last = f
					select {
					case reports <- f:
					case <-ctx.Done():
						return
					}
				}
			}
		}
	}()
	return reports, nil
}

package main

import (
	"context"
	"fmt"
	"log/slog"
	"os"
	"os/signal"
	"strconv"
	"sync"
	"syscall"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/config"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim/vclock"
)

// daemon is a running daemon, as tests see it.
type daemon struct {
	svc      *controller.Service
	follower *controller.Follower
	backend  *simBackend // nil on real hardware
	dir      *statedir.Dir
}

// serve opens the state directory and the backend, assembles the controller and runs it until
// ctx ends; then it stops everything, records a clean stop if the motor is known to stand, and
// releases the hardware.
func serve(ctx context.Context, cfg fileConfig, o options, log *slog.Logger) (err error) {
	if cfg.Hardware.Backend != config.BackendSim {
		// before anything is opened or taken: the marker must survive for a build that can
		return fmt.Errorf("hardware backend %q: this build has no drivers for it yet; use %q", cfg.Hardware.Backend, config.BackendSim)
	}
	dir, err := statedir.Open(cfg.StateDir(), statedir.Options{})
	if err != nil {
		return err // names the process holding the directory
	}
	defer dir.Close()
	marker, clean, err := dir.TakeMarker()
	switch {
	case err != nil:
		log.Warn("clean-stop marker unusable: treating the last stop as a crash", "err", err)
	case !clean:
		log.Warn("no clean stop recorded (first start, or the daemon was killed): the motor position is not trusted until it is found again")
	}
	var clk clock.Clock = clock.Wall{}
	if o.virtual {
		clk = vclock.New(vclock.Epoch)
	}
	var res controller.Resources
	var backend *simBackend
	switch cfg.Hardware.Backend {
	case config.BackendSim:
		if backend, err = openSim(cfg, clk, dir, log); err != nil {
			return err
		}
		res = backend.resources()
	}
	defer func() {
		// Whatever happened, the hardware is left safe: carrier dropped, motor released.
		if herr := res.Close(); herr != nil {
			log.Error("halting the hardware", "err", herr)
		}
		if backend != nil {
			backend.save()
		}
	}()
	a, err := controller.Assemble(ctx, cfg.Station, res, controller.AssembleOptions{
		Tune:     tunePolicy(cfg.Tuning, log),
		StateDir: dir,
		Service:  &controller.Options{AutoTune: cfg.Tuning.AutoTune, AfterOperation: backend.afterOperationHook(), Logger: log},
		Logger:   log,
	})
	if err != nil {
		return err
	}
	svc := a.Service
	switch hint, hinted := a.State.Hint(); {
	case clean && marker.Trusted:
		a.Axis.Reference(marker.Position)
	case hinted:
		// Where the motor was after the last operation: a first guess for finding it again
		// from a dip, never trusted.
		a.Axis.Reference(hint.Position)
		a.Axis.Distrust("no clean stop recorded; last known near " + strconv.FormatInt(hint.Position, 10))
	default:
		a.Axis.Distrust("no clean stop recorded")
	}
	stale := cfg.Tuning.StaleAfter.Duration
	if backend != nil {
		// The simulated radio speaks only when something changes: its silence says nothing of
		// a dead link.
		stale = -1
	}
	fl, err := controller.NewFollower(svc, controller.FollowOptions{
		RetuneFraction: cfg.Tuning.RetuneFraction, Settle: cfg.Tuning.Settle.Duration, StaleAfter: stale, Logger: log})
	if err != nil {
		return err
	}

	events := svc.Subscribe(1024)
	var wg sync.WaitGroup
	defer wg.Wait()
	wg.Add(2)
	go func() {
		defer wg.Done()
		logEvents(log, events) // until the subscription is closed
	}()
	runDone := make(chan error, 1)
	go func() {
		defer wg.Done()
		runDone <- svc.Run(ctx)
	}()
	// The radio's reports go to the follower; the simulator serves its radio's CAT link.
	var reports <-chan physic.Frequency
	if backend != nil {
		r, err := backend.serveRadio(ctx, cfg.Radio, &wg)
		if err != nil {
			return err
		}
		reports = r
	}
	d := &daemon{svc: svc, follower: fl, backend: backend, dir: dir}
	if o.ready != nil {
		o.ready(d)
	}
	if f, ok := d.radioFrequency(); ok {
		// The loop starts calibrated (once, if it may key) and then follows the radio.
		if !svc.Tuner().Calibrated() && cfg.Tuning.Transmit && cfg.Tuning.AutoTune {
			if _, err := svc.Submit(controller.Request{Kind: controller.Calibrate, Source: controller.SourceSchedule, Freq: f}); err != nil {
				return err
			}
		}
		fl.Update(f, controller.SourceRadio)
	}
	// SIGHUP clears a latched fault, as an operator's reset (the position stays untrusted).
	hup := make(chan os.Signal, 1)
	signal.Notify(hup, syscall.SIGHUP)
	defer signal.Stop(hup)
	for {
		select {
		case <-ctx.Done():
			runErr := <-runDone
			events.Close()
			if m, ok := svc.CleanStop(); ok && runErr == nil {
				if werr := dir.WriteMarker(m); werr != nil {
					log.Error("clean-stop marker not written", "err", werr)
				} else {
					log.Info("clean stop recorded", "position", m.Position, "trusted", m.Trusted)
				}
			} else {
				log.Warn("no clean-stop marker written: the next start will find the position again")
			}
			return runErr
		case <-hup:
			log.Warn("SIGHUP: resetting a latched fault")
			if _, err := svc.Submit(controller.Request{Kind: controller.Reset, Source: controller.SourceOperator}); err != nil {
				log.Error("reset", "err", err)
			}
		case f := <-reports:
			// Every report is the follower's to judge: the tuner's own carrier, a move within
			// the tuned window, a band change, a knob still turning.
			fl.Update(f, controller.SourceRadio)
		}
	}
}

// radioFrequency is the radio's frequency, where the backend knows it.
func (d *daemon) radioFrequency() (physic.Frequency, bool) {
	if d.backend == nil {
		return 0, false
	}
	return d.backend.station.Radio.Frequency(), true
}

// tunePolicy is the tuner's part of the configured tuning policy.
func tunePolicy(t config.Tuning, log *slog.Logger) tune.Options {
	return tune.Options{
		Transmit:     t.Transmit,
		TunePower:    physic.Power(t.TunePowerW * float64(physic.Watt)),
		MaxForward:   physic.Power(t.MaxForwardW * float64(physic.Watt)),
		TargetSWR:    t.TargetSWR,
		CarrierLimit: t.CarrierLimit.Duration,
		Logger:       log,
	}
}

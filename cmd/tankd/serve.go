package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"os"
	"os/signal"
	"strconv"
	"sync"
	"syscall"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/api"
	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/config"
	"github.com/tankd/tankd/controller/metrics"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/sweeps"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim/vclock"
)

// daemon is a running daemon, as tests see it.
type daemon struct {
	svc      *controller.Service
	follower *controller.Follower
	backend  *simBackend // nil on real hardware
	dir      *statedir.Dir
	addr     string // the HTTP API's address
}

// quietLimit is how long an operation may go without a word (no move, no reading, no change
// of state: the service republishes its snapshot at every one) before the run loop counts as
// unhealthy and the systemd watchdog is no longer fed. The longest silent wait in an operation
// is a settle or a carrier wait, seconds at most.
const quietLimit = 20 * time.Second

// serve opens the API's listener, the state directory and the backend, assembles the
// controller, and runs it with the API, the metrics and the sweep recorder until ctx ends; then
// it stops everything, records a clean stop if the motor is known to stand, and releases the
// hardware.
func serve(ctx context.Context, cfg fileConfig, o options, log *slog.Logger) (err error) {
	if cfg.Hardware.Backend != config.BackendSim {
		// before anything is opened or taken: the marker must survive for a build that can
		return fmt.Errorf("hardware backend %q: this build has no drivers for it yet; use %q", cfg.Hardware.Backend, config.BackendSim)
	}
	token, err := readToken(cfg.HTTP.TokenFile)
	if err != nil {
		return err
	}
	// The listener first: a port in use stops the daemon before any hardware moves.
	ln, err := listen(cfg.HTTP.Listen)
	if err != nil {
		return err
	}
	defer ln.Close() // until the server owns it
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
	backend, err := openSim(cfg, clk, dir, log)
	if err != nil {
		return err
	}
	res := backend.resources()
	defer func() {
		// Whatever happened, the hardware is left safe: carrier dropped, motor released.
		if herr := res.Close(); herr != nil {
			log.Error("halting the hardware", "err", herr)
		}
		backend.save()
	}()
	a, err := controller.Assemble(ctx, cfg.Station, res, controller.AssembleOptions{
		Tune:     tunePolicy(cfg.Tuning, log),
		StateDir: dir,
		Service:  &controller.Options{AutoTune: cfg.Tuning.AutoTune, AfterOperation: backend.afterOperationHook(), Logger: log},
		Logger:   log,
		Place: func(ax *motion.Axis, st *controller.State) {
			switch hint, hinted := st.Hint(); {
			case clean && marker.Trusted:
				ax.Reference(marker.Position)
			case hinted:
				// Where the motor was after the last operation: a first guess for finding it
				// again from a dip, never trusted.
				ax.Reference(hint.Position)
				ax.Distrust("no clean stop recorded; last known near " + strconv.FormatInt(hint.Position, 10))
			default:
				ax.Distrust("no clean stop recorded")
			}
		},
	})
	if err != nil {
		return err
	}
	svc := a.Service
	// The simulated radio speaks only when something changes: its silence says nothing of a
	// dead link, so it is never marked stale.
	fl, err := controller.NewFollower(svc, controller.FollowOptions{
		RetuneFraction: cfg.Tuning.RetuneFraction, Settle: cfg.Tuning.Settle.Duration, StaleAfter: -1, Logger: log})
	if err != nil {
		return err
	}

	// Everything that listens subscribes before the service runs, so that nothing is missed.
	v := versionString()
	met, err := metrics.New(svc, metrics.Options{Version: v, Logger: log})
	if err != nil {
		return err
	}
	recs, err := sweeps.Open(dir.SweepsPath(), sweeps.Options{Logger: log})
	if err != nil {
		return err
	}
	recSub := svc.Subscribe(sweeps.SubscriptionDepth)
	events := svc.Subscribe(1024)
	healthy := func() error { return runHealth(svc, clk) }
	h, err := api.New(api.Options{Service: svc, Follower: fl, Sweeps: sweepStore{recs}, Token: token,
		SetFrequency: backend.station.Radio.SetFrequency, Ready: healthy, Version: v, Logger: log, Clock: clk})
	if err != nil {
		return err
	}
	mux := http.NewServeMux()
	mux.Handle("GET /metrics", met.Handler())
	mux.Handle("/", h)

	var wg sync.WaitGroup
	defer wg.Wait()
	runCtx, stopRun := context.WithCancel(context.Background())
	defer stopRun()
	wg.Add(3)
	go func() {
		defer wg.Done()
		logEvents(log, events) // until the subscription is closed
	}()
	go func() {
		defer wg.Done()
		// ends when its subscription is closed, after the service has stopped, so that the
		// last operation's recording is written
		if err := recs.Run(runCtx, recSub); err != nil && !errors.Is(err, context.Canceled) {
			log.Error("sweep recorder", "err", err)
		}
	}()
	go func() {
		defer wg.Done()
		if err := met.Run(ctx); err != nil && !errors.Is(err, context.Canceled) {
			log.Error("metrics", "err", err)
		}
	}()
	runDone := make(chan error, 1)
	go func() { runDone <- svc.Run(ctx) }()
	// The radio's reports go to the follower; the simulator serves its radio's CAT link.
	reports, err := backend.serveRadio(ctx, cfg.Radio, &wg)
	if err != nil {
		return err
	}
	srv := serveHTTP(ln, mux, log)
	srv.srv.RegisterOnShutdown(h.Close)
	d := &daemon{svc: svc, follower: fl, backend: backend, dir: dir, addr: ln.Addr().String()}
	if o.ready != nil {
		o.ready(d)
	}
	f := backend.station.Radio.Frequency()
	// The loop starts calibrated (once, if it may key) and then follows the radio.
	if !svc.Tuner().Calibrated() && cfg.Tuning.Transmit && cfg.Tuning.AutoTune {
		if _, err := svc.Submit(controller.Request{Kind: controller.Calibrate, Source: controller.SourceSchedule, Freq: f}); err != nil {
			return err
		}
	}
	fl.Update(f, controller.SourceRadio)
	sd := newNotifier(log)
	sd.ready()
	wg.Add(1)
	go func() {
		defer wg.Done()
		sd.watch(ctx, healthy)
	}()
	// SIGHUP clears a latched fault, as an operator's reset (the position stays untrusted).
	hup := make(chan os.Signal, 1)
	signal.Notify(hup, syscall.SIGHUP)
	defer signal.Stop(hup)
	for {
		select {
		case <-ctx.Done():
			sd.stopping()
			srv.shutdown()
			runErr := <-runDone
			events.Close()
			recSub.Close()
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

// runHealth says whether the service's run loop is healthy: running, and not silent in the
// middle of an operation for longer than quietLimit.
func runHealth(svc *controller.Service, clk clock.Clock) error {
	select {
	case <-svc.Done():
		return errors.New("the run loop has stopped")
	default:
	}
	sn := svc.Snapshot()
	if sn.Busy {
		if quiet := clk.Now().Sub(sn.At); quiet > quietLimit {
			return fmt.Errorf("the running operation has said nothing for %v", quiet.Round(time.Second))
		}
	}
	return nil
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

// sweepStore serves the sweep recorder's recordings to the API.
type sweepStore struct{ s *sweeps.Store }

// List implements api.SweepStore.
func (ss sweepStore) List() ([]api.Sweep, error) {
	var out []api.Sweep
	for _, in := range ss.s.List() {
		out = append(out, apiSweep(in))
	}
	return out, nil
}

// Open implements api.SweepStore.
func (ss sweepStore) Open(id string) (api.Sweep, io.ReadCloser, error) {
	in, rc, err := ss.s.Open(id)
	if errors.Is(err, sweeps.ErrInvalidID) {
		err = fmt.Errorf("%w: %w", api.ErrSweepNotFound, err)
	}
	if err != nil {
		return api.Sweep{}, nil, err
	}
	return apiSweep(in), rc, nil
}

func apiSweep(in sweeps.Info) api.Sweep {
	return api.Sweep{ID: in.ID, Time: in.Time, Kind: in.Kind, Freq: in.Freq, Outcome: in.Outcome,
		Request: in.Request, Samples: in.Samples, Bytes: in.Size}
}

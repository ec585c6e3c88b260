// Command tankd is the loop controller daemon.
//
// For now it runs the controller on the built-in simulator (or a station described in TOML)
// in real time: the simulated radio sits on a pseudo-terminal that speaks the ASCII CAT dialect,
// so that any terminal or CAT program can change its frequency; the daemon follows every change
// (pre-positioning the loop at once, and tuning it with a carrier when -auto-tune allows), logs
// every stage, and keeps the memory map and the backlash calibration in its state directory.
// The HTTP API, metrics, the CAT client for a real radio and the hardware drivers come next.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io/fs"
	"log/slog"
	"math"
	"os"
	"os/signal"
	"path/filepath"
	"strconv"
	"sync"
	"syscall"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/statedir"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/radio"
	"github.com/tankd/tankd/sim/vclock"
)

// simHardwareFile is where the simulated motor and capacitor keep their state between runs, in
// the state directory beside the daemon's own files (the simulator's, not the daemon's: the
// daemon never reads it).
const simHardwareFile = "simulated-hardware"

func main() {
	os.Exit(run(os.Args[1:]))
}

type options struct {
	config   string
	state    string
	autoTune bool
	virtual  bool
	level    slog.Level
}

func parse(args []string) (options, error) {
	var o options
	fs := flag.NewFlagSet("tankd", flag.ContinueOnError)
	fs.StringVar(&o.config, "config", "", "simulated station description (TOML); default: the built-in demo station")
	fs.StringVar(&o.state, "state", defaultStateDir(), "directory for the memory map and the backlash calibration")
	fs.BoolVar(&o.autoTune, "auto-tune", true, "tune with a carrier on every frequency change (the simulator's radio keys itself); false: pre-position only")
	level := fs.String("log-level", "info", "debug, info, warn or error")
	simClock := fs.String("sim-clock", "real", "the simulator's clock: real, or virtual (operations take no time; for tests)")
	if err := fs.Parse(args); err != nil {
		return o, err
	}
	if fs.NArg() > 0 {
		return o, fmt.Errorf("unexpected arguments %v", fs.Args())
	}
	switch *simClock {
	case "real":
	case "virtual":
		o.virtual = true
	default:
		return o, fmt.Errorf("-sim-clock %q: want real or virtual", *simClock)
	}
	if err := o.level.UnmarshalText([]byte(*level)); err != nil {
		return o, fmt.Errorf("-log-level %q: want debug, info, warn or error", *level)
	}
	return o, nil
}

// defaultStateDir is systemd's StateDirectory when run as a service, else the user's state
// directory.
func defaultStateDir() string {
	if d := os.Getenv("STATE_DIRECTORY"); d != "" {
		return d
	}
	if d := os.Getenv("XDG_STATE_HOME"); d != "" {
		return filepath.Join(d, "tankd")
	}
	if h, err := os.UserHomeDir(); err == nil {
		return filepath.Join(h, ".local", "state", "tankd")
	}
	return "tankd-state"
}

func run(args []string) int {
	o, err := parse(args)
	if errors.Is(err, flag.ErrHelp) {
		return 0
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "tankd:", err)
		return 2
	}
	log := slog.New(slog.NewTextHandler(os.Stderr, &slog.HandlerOptions{Level: o.level}))
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	if err := serve(ctx, o, log); err != nil {
		log.Error("tankd stopped", "err", err)
		return 1
	}
	log.Info("tankd stopped")
	return 0
}

// serve builds the station and the controller and runs them until ctx ends.
func serve(ctx context.Context, o options, log *slog.Logger) (err error) {
	spec := sim.DefaultSpec()
	if o.config != "" {
		if spec, err = sim.LoadSpec(o.config); err != nil {
			return err
		}
	}
	dir, err := statedir.Open(o.state, statedir.Options{})
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
	st, err := sim.NewStation(spec, clk)
	if err != nil {
		return err
	}
	// The simulated hardware keeps its own state, as a real capacitor stays where it was left.
	hwPath := filepath.Join(dir.Path(), simHardwareFile)
	switch err := st.LoadHardware(hwPath); {
	case err == nil:
	case errors.Is(err, fs.ErrNotExist):
		log.Info("simulated hardware: first start, the capacitor stands where the station description leaves it")
	default:
		log.Warn("simulated hardware state unreadable: starting it afresh", "err", err)
	}
	// The daemon is told what the station description says, with the play as an upper bound
	// until a calibration measures it.
	nominal := spec.NominalBacklash()
	axOpts := spec.AxisOptions(nominal)
	axOpts.Logger = log
	ax, err := motion.NewAxis(st.Mech, clk, st.Mech.Switches(), axOpts)
	if err != nil {
		return err
	}
	defer func() {
		if err := ax.Halt(); err != nil {
			log.Error("halt the motor", "err", err)
		}
		if err := st.SaveHardware(hwPath); err != nil {
			log.Error("simulated hardware state not saved", "err", err)
		}
	}()
	if err := ax.Enable(ctx); err != nil {
		return err
	}
	mo, err := spec.MapOptions()
	if err != nil {
		return err
	}
	state, err := controller.LoadState(dir, controller.StateOptions{Map: mo, Clock: clk, Logger: log})
	if err != nil {
		return err
	}
	switch hint, hinted := state.Hint(); {
	case clean && marker.Trusted:
		ax.Reference(marker.Position)
	case hinted:
		// Where the motor was after the last operation: a first guess for finding it again
		// from a dip, never trusted.
		ax.Reference(hint.Position)
		ax.Distrust("no clean stop recorded; last known near " + strconv.FormatInt(hint.Position, 10))
	default:
		ax.Distrust("no clean stop recorded")
	}
	// After every operation, with the motor at rest: the simulated hardware's state, written
	// only when it changed (SD cards wear). The service writes its own files.
	lastHW := int64(math.MinInt64)
	saveHW := func(controller.RequestStatus) {
		if p := st.Mech.MotorPosition(); p != lastHW {
			if err := st.SaveHardware(hwPath); err != nil {
				log.Warn("simulated hardware state not saved", "err", err)
			} else {
				lastHW = p
			}
		}
	}
	to := spec.TunerOptions(tune.Options{Transmit: true, Logger: log}, nominal)
	svc, err := controller.NewService(tune.Deps{Axis: ax, Sensor: st.Sensor(), Clock: clk,
		Transmitter: st.Radio, Thermometer: st.Thermometer()},
		to, controller.Options{AutoTune: o.autoTune, State: state, AfterOperation: saveHW, Logger: log})
	if err != nil {
		return err
	}
	// The simulated radio speaks only when something changes: its silence says nothing of a
	// dead link, so its frequency is never marked stale. The service drives the follower.
	fl, err := controller.NewFollower(svc, controller.FollowOptions{StaleAfter: -1, Logger: log})
	if err != nil {
		return err
	}
	pt, path, err := radio.OpenPTY()
	if err != nil {
		return err
	}
	defer pt.Close()
	log.Info("simulated radio", "cat", path, "dialect", "ASCII (semicolon-terminated)",
		"try", fmt.Sprintf("printf 'FA00003700000;' > %s", path))
	log.Warn("simulated station: the RF here is imaginary, but a real loop carries kilovolts; read the safety notes in README.md")

	events := svc.Subscribe(1024)
	sub := st.Radio.Subscribe(16)
	defer sub.Close()
	var wg sync.WaitGroup
	defer wg.Wait()
	wg.Add(3)
	go func() {
		defer wg.Done()
		logEvents(log, events) // until the subscription is closed
	}()
	runDone := make(chan error, 1)
	go func() {
		defer wg.Done()
		runDone <- svc.Run(ctx)
	}()
	go func() {
		defer wg.Done()
		if err := st.Radio.ServeASCII(ctx, pt, radio.ASCIIOpts{}); err != nil && !errors.Is(err, context.Canceled) {
			log.Error("simulated CAT link", "err", err)
		}
	}()
	// The loop starts calibrated (once) and tuned to the radio's frequency; then it follows
	// the radio.
	if !svc.Tuner().Calibrated() && o.autoTune {
		if _, err := svc.Submit(controller.Request{Kind: controller.Calibrate, Source: controller.SourceOperator, Freq: st.Radio.Frequency()}); err != nil {
			return err
		}
	}
	fl.Update(st.Radio.Frequency(), controller.SourceRadio)
	// SIGHUP clears a latched fault, as an operator's reset (the position stays untrusted).
	hup := make(chan os.Signal, 1)
	signal.Notify(hup, syscall.SIGHUP)
	defer signal.Stop(hup)
	for {
		select {
		case <-ctx.Done():
			runErr := <-runDone
			events.Close()
			if m, ok := svc.CleanStop(); ok {
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
		case ev := <-sub.Events():
			// Every report is the follower's to judge: the tuner's own carrier, a move within
			// the tuned window, a band change, a knob still turning.
			fl.Update(ev.State.Frequency(), controller.SourceRadio)
		}
	}
}

// logEvents writes the service's events to the log (readings only at debug level) until the
// subscription is closed.
func logEvents(log *slog.Logger, sub *controller.Subscription) {
	l := log.With("component", "tune")
	for ev := range sub.Events() {
		if ev.Kind != controller.EventTune {
			continue
		}
		e := ev.Tune
		switch e.Kind {
		case tune.KindReading:
			l.Debug("reading", "stage", e.Stage, "pos", e.Pos, "swr", e.SWR, "forward", e.Forward, "req", ev.Request)
		case tune.KindState:
			l.Info("state", "to", e.State, "freq", e.Freq, "req", ev.Request)
		case tune.KindPrediction:
			l.Info("prediction", "source", e.Prediction.Source, "pos", e.Prediction.Pos, "sigma", e.Prediction.Sigma, "req", ev.Request)
		case tune.KindFit:
			l.Info("fit", "method", e.Fit.Method, "centre", e.Fit.Centre, "q_loaded", e.Fit.QLoaded, "bandwidth_hz", e.Fit.Bandwidth, "min_swr", e.Fit.MinSWR, "req", ev.Request)
		case tune.KindResult:
			r := e.Result
			l.Info("done", "outcome", r.Outcome, "freq", r.Freq, "pos", r.Pos, "swr", r.SWR, "took", r.Duration(), "rf", r.RFTime, "req", ev.Request)
		case tune.KindMove:
			l.Debug("move", "stage", e.Stage, "from", e.Pos, "to", e.Target, "req", ev.Request)
		default:
			l.Info(string(e.Kind), "text", e.Text, "pos", e.Pos, "req", ev.Request)
		}
	}
	if n := sub.Dropped(); n > 0 {
		l.Warn("events not logged: the log fell behind", "dropped", n)
	}
}

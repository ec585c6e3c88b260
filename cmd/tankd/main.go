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
	"os"
	"os/signal"
	"path/filepath"
	"syscall"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/memmap"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/store"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
	"github.com/tankd/tankd/sim/radio"
	"github.com/tankd/tankd/sim/vclock"
)

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
func serve(ctx context.Context, o options, log *slog.Logger) error {
	spec := sim.DefaultSpec()
	if o.config != "" {
		var err error
		if spec, err = sim.LoadSpec(o.config); err != nil {
			return err
		}
	}
	if err := os.MkdirAll(o.state, 0o700); err != nil {
		return fmt.Errorf("state directory: %w", err)
	}
	var clk clock.Clock = clock.Wall{}
	if o.virtual {
		clk = vclock.New(vclock.Epoch)
	}
	st, err := sim.NewStation(spec, clk)
	if err != nil {
		return err
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
	}()
	if err := ax.Enable(ctx); err != nil {
		return err
	}
	if spec.Drive.Home == nil {
		// A simulated loop with no switch starts where it was left, as installed.
		ax.Reference(st.Mech.MotorPosition())
	}
	mo, err := spec.MapOptions(sim.DefaultTolerance)
	if err != nil {
		return err
	}
	mapPath := filepath.Join(o.state, "loop.map")
	mm, err := memmap.Load(mapPath, mo)
	switch {
	case errors.Is(err, store.ErrUsedPrevious):
		log.Warn("memory map: the last save was damaged; using the copy before it", "err", err)
	case err != nil:
		return fmt.Errorf("memory map: %w", err)
	}
	log.Info("memory map", "path", mapPath, "points", mm.Len())
	to := spec.TunerOptions(tune.Options{Transmit: true, Logger: log}, nominal)
	calPath := filepath.Join(o.state, "backlash")
	svc, err := controller.NewService(tune.Deps{Axis: ax, Sensor: st.Sensor(), Clock: clk, Map: mm,
		Transmitter: st.Radio, Thermometer: st.Thermometer(), Observer: logEvents(log)},
		to, controller.Options{AutoTune: o.autoTune, MapPath: mapPath, CalibrationPath: calPath, Logger: log})
	if err != nil {
		return err
	}
	switch c, err := tune.LoadCalibration(calPath); {
	case err == nil || errors.Is(err, store.ErrUsedPrevious):
		svc.Tuner().UseBacklash(c.Backlash)
		log.Info("backlash calibration", "steps", c.Backlash, "measured", c.At)
	case errors.Is(err, fs.ErrNotExist):
		log.Info("no backlash calibration yet: the first tune measures it")
	default:
		log.Warn("backlash calibration unreadable: measuring again", "err", err)
	}
	pt, path, err := radio.OpenPTY()
	if err != nil {
		return err
	}
	defer pt.Close()
	log.Info("simulated radio", "cat", path, "dialect", "ASCII (semicolon-terminated)",
		"try", fmt.Sprintf("printf 'FA00003700000;' > %s", path))
	log.Warn("simulated station: the RF here is imaginary, but a real loop carries kilovolts; read the safety notes in README.md")

	sub := st.Radio.Subscribe(16)
	defer sub.Close()
	done := make(chan struct{})
	var runErr error
	go func() {
		defer close(done)
		runErr = svc.Run(ctx)
	}()
	catDone := make(chan struct{})
	go func() {
		defer close(catDone)
		if err := st.Radio.ServeASCII(ctx, pt, radio.ASCIIOpts{}); err != nil && !errors.Is(err, context.Canceled) {
			log.Error("simulated CAT link", "err", err)
		}
	}()
	// The loop starts tuned to the radio's frequency; then it follows the radio.
	calibrated := svc.Tuner().Calibrated()
	first := controller.Request{Kind: controller.Follow, Freq: st.Radio.Frequency()}
	if !calibrated && o.autoTune {
		first.Kind = controller.Calibrate
	}
	if err := svc.Submit(first); err != nil {
		return err
	}
	last := st.Radio.Frequency()
	for {
		select {
		case <-ctx.Done():
			<-done
			<-catDone
			return runErr
		case ev := <-sub.Events():
			f := ev.State.Frequency()
			if f == last || ev.State.TX {
				continue // the tuner's own carrier, or nothing new
			}
			last = f
			if err := svc.Submit(controller.Request{Kind: controller.Follow, Freq: f}); err != nil {
				log.Warn("frequency not followed", "freq", f, "err", err)
			}
		}
	}
}

// logEvents writes the tuner's stages to the log (readings only at debug level).
func logEvents(log *slog.Logger) tune.Observer {
	l := log.With("component", "tune")
	return tune.ObserverFunc(func(e tune.Event) {
		switch e.Kind {
		case tune.KindReading:
			l.Debug("reading", "stage", e.Stage, "pos", e.Pos, "swr", e.SWR, "forward", e.Forward)
		case tune.KindState:
			l.Info("state", "to", e.State, "freq", e.Freq)
		case tune.KindPrediction:
			l.Info("prediction", "source", e.Prediction.Source, "pos", e.Prediction.Pos, "sigma", e.Prediction.Sigma)
		case tune.KindFit:
			l.Info("fit", "method", e.Fit.Method, "centre", e.Fit.Centre, "q_loaded", e.Fit.QLoaded, "bandwidth_hz", e.Fit.Bandwidth, "min_swr", e.Fit.MinSWR)
		case tune.KindResult:
			r := e.Result
			l.Info("done", "outcome", r.Outcome, "freq", r.Freq, "pos", r.Pos, "swr", r.SWR, "took", r.Duration(), "rf", r.RFTime)
		case tune.KindMove:
			l.Debug("move", "stage", e.Stage, "from", e.Pos, "to", e.Target)
		default:
			l.Info(string(e.Kind), "text", e.Text, "pos", e.Pos)
		}
	})
}

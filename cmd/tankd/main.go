// Command tankd is the loop controller daemon.
//
// It reads one configuration file (-config; with none, the built-in simulator), validates all
// of it before it opens any device, assembles the controller on the configured backend and runs
// it until SIGTERM or SIGINT: it follows the radio's frequency (pre-positioning the loop at once
// on a band change, tuning it with a carrier when the policy allows), logs every stage, keeps
// the memory map and the calibration in its state directory, and on the way out stops the
// motor, drops any carrier and records a clean stop. SIGHUP clears a latched fault.
//
// On the simulator the radio sits on a pseudo-terminal that speaks the configured CAT dialect,
// so that any terminal or CAT program can change its frequency.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"syscall"
)

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

// options are the command line's.
type options struct {
	config      string
	printConfig bool
	state       string // overrides the configuration's state directory
	listen      string // overrides the configuration's HTTP listen address
	version     bool
	level       slog.Level
	format      string // text or json
	virtual     bool   // the simulator on the virtual clock (tests)
	// ready, if set, is called once the daemon runs (tests watch it through the service).
	ready func(*daemon)
}

func parse(args []string, stderr io.Writer) (options, error) {
	var o options
	fs := flag.NewFlagSet("tankd", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.StringVar(&o.config, "config", "", "configuration file (TOML); default: the built-in simulator (see configs/)")
	fs.BoolVar(&o.printConfig, "print-config", false, "print the effective configuration, every default written out, and exit")
	fs.StringVar(&o.state, "state", "", "state directory, instead of the configuration's [state] dir")
	fs.StringVar(&o.listen, "listen", "", "the HTTP API's address (host:port), instead of the configuration's [http] listen")
	fs.BoolVar(&o.version, "version", false, "print the version and exit")
	level := fs.String("log-level", "info", "debug, info, warn or error")
	fs.StringVar(&o.format, "log-format", "text", "text or json")
	simClock := fs.String("sim-clock", "real", "the simulator's clock: real, or virtual (operations take no time; for tests)")
	if err := fs.Parse(args); err != nil {
		return o, err
	}
	var errs []error
	if fs.NArg() > 0 {
		errs = append(errs, fmt.Errorf("unexpected arguments %v", fs.Args()))
	}
	switch *simClock {
	case "real":
	case "virtual":
		o.virtual = true
	default:
		errs = append(errs, fmt.Errorf("-sim-clock %q: want real or virtual", *simClock))
	}
	if err := o.level.UnmarshalText([]byte(*level)); err != nil {
		errs = append(errs, fmt.Errorf("-log-level %q: want debug, info, warn or error", *level))
	}
	if o.format != "text" && o.format != "json" {
		errs = append(errs, fmt.Errorf("-log-format %q: want text or json", o.format))
	}
	if o.state != "" {
		abs, err := filepath.Abs(o.state)
		if err != nil {
			errs = append(errs, fmt.Errorf("-state %q: %w", o.state, err))
		}
		o.state = abs
	}
	return o, errors.Join(errs...)
}

// run is the daemon's life: exit status 0 after a clean stop, 1 when it could not run or
// stopped on an error, 2 for bad flags or a bad configuration (every problem named).
func run(args []string, stdout, stderr io.Writer) int {
	o, err := parse(args, stderr)
	if errors.Is(err, flag.ErrHelp) {
		return 0
	}
	if err != nil {
		fmt.Fprintln(stderr, "tankd:", err)
		return 2
	}
	if o.version {
		fmt.Fprintln(stdout, "tankd", versionString())
		return 0
	}
	cfg, err := loadConfig(o.config)
	if o.state != "" || o.listen != "" {
		if o.state != "" {
			cfg.State.Dir = o.state
		}
		if o.listen != "" {
			cfg.HTTP.Listen = o.listen
		}
		if err == nil {
			err = cfg.validate()
		}
	}
	if err != nil {
		fmt.Fprintf(stderr, "tankd: the configuration has problems:\n  %s\n", strings.ReplaceAll(err.Error(), "\n", "\n  "))
		return 2
	}
	if o.printConfig {
		if err := printConfig(stdout, cfg); err != nil {
			fmt.Fprintln(stderr, "tankd:", err)
			return 1
		}
		return 0
	}
	log := newLogger(stderr, o)
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	if err := serve(ctx, cfg, o, log); err != nil {
		log.Error("tankd stopped", "err", err)
		return 1
	}
	log.Info("tankd stopped")
	return 0
}

func newLogger(w io.Writer, o options) *slog.Logger {
	ho := &slog.HandlerOptions{Level: o.level}
	if o.format == "json" {
		return slog.New(slog.NewJSONHandler(w, ho))
	}
	return slog.New(slog.NewTextHandler(w, ho))
}

// Command tanksim is the simulator's front end: a design calculator for builders, SWR curves,
// single simulated tunes shown stage by stage, the benchmark, and sweep recording and replay.
//
//	tanksim design  [flags]   electrical design of a loop, per frequency or band
//	tanksim curve   [flags]   SWR against frequency or motor step, as SVG or PNG
//	tanksim tune    [flags]   one simulated tune, stage by stage, with a plot
//	tanksim bench   [flags]   the controller against an exhaustive sweep and an oracle
//	tanksim record  [flags]   a sweep recording from the simulator
//	tanksim replay  [flags] F the controller against a recording
//
// Run "tanksim <command> -h" for a command's flags.
package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"sort"
)

type command struct {
	summary string
	run     func(args []string, stdout, stderr io.Writer) error
}

func commands() map[string]command {
	return map[string]command{
		"design": {"electrical design of a loop per frequency or band", runDesign},
		"curve":  {"plot SWR against frequency or motor step (SVG or PNG)", runCurve},
		"bench":  {"benchmark the controller against the simulator and two reference strategies", runBench},
		"tune":   {"one simulated tune, stage by stage, with an optional plot", runTune},
		"record": {"sweep the simulated loop through the dip and write a recording", runRecord},
		"replay": {"run the controller against a sweep recording", runReplay},
	}
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: tanksim <command> [flags]")
	fmt.Fprintln(w, "\ncommands:")
	cmds := commands()
	names := make([]string, 0, len(cmds))
	for n := range cmds {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		fmt.Fprintf(w, "  %-8s %s\n", n, cmds[n].summary)
	}
	fmt.Fprintln(w, "\nRun \"tanksim <command> -h\" for a command's flags.")
}

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func run(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		usage(stderr)
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	cmd, ok := commands()[args[0]]
	if !ok {
		fmt.Fprintf(stderr, "tanksim: unknown command %q\n\n", args[0])
		usage(stderr)
		return 2
	}
	if err := cmd.run(args[1:], stdout, stderr); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		fmt.Fprintf(stderr, "tanksim %s: %v\n", args[0], err)
		var u usageError
		if errors.As(err, &u) {
			return 2
		}
		return 1
	}
	return 0
}

// usageError marks a bad command line (exit status 2).
type usageError struct{ error }

func (u usageError) Unwrap() error { return u.error }

func newFlags(name string, stderr io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet("tanksim "+name, flag.ContinueOnError)
	fs.SetOutput(stderr)
	return fs
}

// parseFlags parses and wraps failures as usage errors.
func parseFlags(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return usageError{err}
	}
	if fs.NArg() > 0 {
		return usageError{fmt.Errorf("unexpected arguments: %v", fs.Args())}
	}
	return nil
}

// Caution is printed with every design report and plot: the loop is dangerous.
const caution = `CAUTION: a transmitting loop's capacitor carries kilovolts, even at low power, and the RF
field near the loop is strong. Rate the capacitor for the peak voltage above with a wide margin,
keep people and animals away while transmitting, follow your licence conditions and local
RF-exposure rules and electrical codes, fit mechanical end stops where the capacitor has them,
and ground and protect the installation against lightning.`

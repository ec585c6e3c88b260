package bench

import (
	"bufio"
	"context"
	"errors"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"testing"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/controller/tune"
	"github.com/tankd/tankd/sim"
)

// The tuner's behaviour, scripted: testdata/tune/*.txt hold commands ("station default",
// "tune 3750000 cancel-at=refining", ...) each followed by "----" and the output it must give.
// Run with -rewrite to regenerate the expected outputs after a deliberate change, and read the
// diff before committing it.
var rewrite = flag.Bool("rewrite", false, "rewrite the expected outputs of the tune scripts")

const scriptDir = "../../testdata/tune"

// seen collects every state transition the scripts drive, to check the table is covered.
var seen = map[[2]tune.State]bool{}

func TestTuneScripts(t *testing.T) {
	files, err := filepath.Glob(filepath.Join(scriptDir, "*.txt"))
	if err != nil || len(files) == 0 {
		t.Fatalf("no scripts in %s (%v)", scriptDir, err)
	}
	for _, f := range files {
		t.Run(strings.TrimSuffix(filepath.Base(f), ".txt"), func(t *testing.T) { runScript(t, f) })
	}
	// Every edge of the state machine must be exercised by some script.
	var missing []string
	for from, tos := range tune.Transitions() {
		for _, to := range tos {
			if !seen[[2]tune.State{from, to}] {
				missing = append(missing, fmt.Sprintf("%s→%s", from, to))
			}
		}
	}
	sort.Strings(missing)
	if len(missing) > 0 {
		t.Errorf("state transitions no script exercises: %s", strings.Join(missing, ", "))
	}
}

type block struct {
	note string // the comment lines before the command, kept by -rewrite
	cmd  string
	want string
}

func parseScript(path string) ([]block, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	var blocks []block
	sc := bufio.NewScanner(f)
	var cur *block
	inOut := false
	var out, note []string
	flush := func() {
		if cur != nil {
			cur.want = strings.Join(out, "\n")
			blocks = append(blocks, *cur)
		}
		cur, inOut, out = nil, false, nil
	}
	for sc.Scan() {
		line := sc.Text()
		switch {
		case inOut && line == "":
			flush()
		case inOut:
			out = append(out, line)
		case line == "----":
			if cur == nil {
				return nil, fmt.Errorf("%s: ---- with no command", path)
			}
			inOut = true
		case line == "" || strings.HasPrefix(line, "#"):
			if cur != nil {
				return nil, fmt.Errorf("%s: command %q has no ---- line", path, cur.cmd)
			}
			if strings.HasPrefix(line, "#") {
				note = append(note, line)
			}
		default:
			if cur != nil {
				return nil, fmt.Errorf("%s: command %q has no ---- line", path, cur.cmd)
			}
			cur = &block{cmd: line, note: strings.Join(note, "\n")}
			note = nil
		}
	}
	flush()
	return blocks, sc.Err()
}

func runScript(t *testing.T, path string) {
	blocks, err := parseScript(path)
	if err != nil {
		t.Fatal(err)
	}
	h := &harness{t: t}
	var rewritten strings.Builder
	for i, b := range blocks {
		got := strings.TrimRight(h.run(b.cmd), "\n")
		if *rewrite {
			if b.note != "" {
				if i > 0 {
					rewritten.WriteString("\n")
				}
				rewritten.WriteString(b.note + "\n")
			}
			fmt.Fprintf(&rewritten, "\n%s\n----\n%s\n", b.cmd, got)
			continue
		}
		if got != b.want {
			t.Errorf("%s: %s\n--- got\n%s\n--- want\n%s", filepath.Base(path), b.cmd, got, b.want)
		}
	}
	if *rewrite {
		if err := os.WriteFile(path, []byte(rewritten.String()), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// harness runs the commands against a rig.
type harness struct {
	t      *testing.T
	r      *Rig
	faults *faults
	hooks  map[tune.State]func()
	states []string
}

// faults wrap the rig's sensor and transmitter to fail on command.
type faults struct {
	sensor     sense.Sensor
	failReads  bool
	failStarts bool
}

func (f *faults) Read(ctx context.Context) (sense.Reading, error) {
	if f.failReads {
		return sense.Reading{}, errors.New("simulated ADC: bus error")
	}
	return f.sensor.Read(ctx)
}

func args(fields []string) (pos []string, kv map[string]string) {
	kv = map[string]string{}
	for _, f := range fields {
		if k, v, ok := strings.Cut(f, "="); ok {
			kv[k] = v
		} else {
			pos = append(pos, f)
		}
	}
	return pos, kv
}

func (h *harness) run(cmd string) string {
	fields := strings.Fields(cmd)
	pos, kv := args(fields[1:])
	var out strings.Builder
	defer func() {
		if r := recover(); r != nil {
			fmt.Fprintf(&out, "panic: %v", r)
		}
	}()
	switch fields[0] {
	case "station":
		h.station(&out, pos, kv)
	case "tune", "follow":
		h.tune(&out, fields[0] == "tune", pos, kv)
	case "calibrate":
		if err := h.r.Station.Radio.SetFrequency(h.freq(pos[0])); err != nil {
			fmt.Fprintf(&out, "radio: %v\n", err)
			break
		}
		res := h.do(kv, func(ctx context.Context) tune.Result { return h.r.Tuner.Calibrate(ctx, h.freq(pos[0])) })
		h.report(&out, res, h.freq(pos[0]))
		fmt.Fprintf(&out, "backlash measured %d, true %.0f\n", res.Backlash, h.r.Station.Spec.Drive.BacklashSteps)
	case "calibrate-elsewhere":
		// a request for a frequency the radio is not on
		res := h.do(kv, func(ctx context.Context) tune.Result { return h.r.Tuner.Calibrate(ctx, h.freq(pos[0])) })
		h.report(&out, res, 0)
		fmt.Fprintf(&out, "radio on %v, transmitting %v\n", h.r.Station.Radio.Frequency(), h.r.Station.Radio.Transmitting())
	case "home":
		res := h.do(kv, h.r.Tuner.Home)
		h.report(&out, res, 0)
		if res.Outcome == tune.Homed {
			fmt.Fprintf(&out, "frame %s\n", h.frame())
		}
	case "reset":
		if err := h.r.Tuner.Reset(); err != nil {
			fmt.Fprintf(&out, "reset: %v\n", err)
		} else {
			fmt.Fprintf(&out, "reset; state %s, position trusted %v\n", h.r.Tuner.State(), h.r.Axis.Trusted())
		}
	case "slip":
		n, _ := strconv.ParseInt(pos[0], 10, 64)
		h.r.Station.Mech.Slip(n)
		fmt.Fprintf(&out, "the shaft slipped %d steps behind the controller's back\n", n)
	case "release":
		ctx := context.Background()
		if err := h.r.Axis.Disable(ctx); err != nil {
			fmt.Fprintf(&out, "disable: %v\n", err)
		}
		if err := h.r.Axis.Enable(ctx); err != nil {
			fmt.Fprintf(&out, "enable: %v\n", err)
		}
		st := h.r.Axis.Snapshot()
		fmt.Fprintf(&out, "motor released and re-energised; position trusted %v (%s)\n", st.Trusted, st.Distrust)
	case "jog":
		// an operator's manual move, outside any tune ("jog 100 fail": the drive fails)
		n, _ := strconv.ParseInt(pos[0], 10, 64)
		if len(pos) > 1 && pos[1] == "fail" {
			h.r.FailDrive()
		}
		err := h.r.Axis.MoveTo(context.Background(), h.r.Axis.Position()+n, 0)
		h.r.watch.fail = false
		if err != nil {
			fmt.Fprintf(&out, "jog: %v\n", err)
		} else {
			fmt.Fprintf(&out, "jogged to %d\n", h.r.Axis.Position())
		}
	case "wait":
		d, err := time.ParseDuration(pos[0])
		if err != nil {
			return err.Error()
		}
		h.r.Clock.Advance(d)
		fmt.Fprintf(&out, "%v later: %.1f °C\n", d, h.r.Station.Temperature())
	case "operator":
		// the operator's own carrier: "operator 5" keys 5 W, "operator off" drops it
		if pos[0] == "off" {
			_ = h.r.Station.Radio.Unkey(context.Background())
			fmt.Fprintln(&out, "operator unkeyed")
		} else {
			w, _ := strconv.ParseFloat(pos[0], 64)
			if err := h.r.Station.Radio.Key(context.Background(), physic.Power(w*float64(physic.Watt))); err != nil {
				fmt.Fprintf(&out, "operator key: %v\n", err)
			} else {
				fmt.Fprintf(&out, "operator keyed %g W\n", w)
			}
		}
	default:
		fmt.Fprintf(&out, "unknown command %q", fields[0])
	}
	return out.String()
}

func (h *harness) freq(s string) physic.Frequency {
	f, err := strconv.ParseFloat(s, 64)
	if err != nil {
		h.t.Fatalf("frequency %q: %v", s, err)
	}
	return physic.Frequency(math.Round(f)) * physic.Hertz
}

// frame says whether the controller's count agrees with the mechanics.
func (h *harness) frame() string {
	off := h.r.Axis.Position() - h.r.Station.Mech.MotorPosition()
	if off == 0 {
		return "true"
	}
	return fmt.Sprintf("off by %d", off)
}

func (h *harness) station(out *strings.Builder, pos []string, kv map[string]string) {
	s, err := sim.Preset(pos[0])
	if err != nil {
		h.t.Fatal(err)
	}
	for _, flag := range pos[1:] {
		kv[flag] = "true"
	}
	desc := s.Description
	num := func(k string, p *float64) {
		if v, ok := kv[k]; ok {
			f, err := strconv.ParseFloat(v, 64)
			if err != nil {
				h.t.Fatalf("%s=%q: %v", k, v, err)
			}
			*p = f
		}
	}
	num("backlash", &s.Drive.BacklashSteps)
	num("miss", &s.Simulator.Drive.MissRate)
	num("swing", &s.Simulator.Weather.SwingK)
	if v, ok := kv["noise"]; ok {
		x, _ := strconv.ParseFloat(v, 64)
		s.Simulator.Coupler.ADCNoiseMV *= x
	}
	if _, ok := kv["slip-on-release"]; ok {
		s.Drive.SlipOnRelease = true
		desc.Drive.SlipOnRelease = true
	}
	if v, ok := kv["stray"]; ok {
		x, _ := strconv.ParseFloat(v, 64)
		s.Loop.StrayPF = x // the real loop differs from its description
	}
	if v, ok := kv["seed"]; ok {
		n, _ := strconv.ParseUint(v, 10, 64)
		s.Simulator.Seed = n
	}
	to := tune.Options{}
	if v, ok := kv["carrier-wait"]; ok {
		d, _ := time.ParseDuration(v)
		to.CarrierWait = d
	}
	if v, ok := kv["timeout"]; ok {
		d, _ := time.ParseDuration(v)
		to.Timeout = d
	}
	h.hooks = map[tune.State]func(){}
	obs := tune.ObserverFunc(func(e tune.Event) {
		if e.Kind != tune.KindState {
			return
		}
		seen[[2]tune.State{e.From, e.State}] = true
		h.states = append(h.states, string(e.State))
		if f := h.hooks[e.State]; f != nil {
			delete(h.hooks, e.State)
			f()
		}
	})
	h.faults = &faults{}
	r, err := NewRig(RigOptions{Truth: s, Described: desc, Observer: obs, Tune: to,
		NominalBacklash: motion.Steps(s.Drive.BacklashSteps*1.5 + 20),
		WrapSensor:      func(in sense.Sensor) sense.Sensor { h.faults.sensor = in; return h.faults },
		NoTransmit:      kv["transmit"] == "false",
		NoPrior:         kv["no-prior"] == "true",
	})
	if err != nil {
		h.t.Fatal(err)
	}
	h.r = r
	lo, hi := r.Axis.SoftLimits()
	fmt.Fprintf(out, "%s: soft limits %d–%d, home switch %v, position trusted %v\n", s.Name, lo, hi, s.Drive.Home != nil, r.Axis.Trusted())
}

// do runs op with the hooks the command asked for: cancel-at, drop-carrier-at,
// fail-reads-at, fail-drive-at, slip-at (STATE[:STEPS]).
func (h *harness) do(kv map[string]string, op func(context.Context) tune.Result) tune.Result {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	h.states = h.states[:0]
	h.states = append(h.states, string(h.r.Tuner.State()))
	hook := func(key string, f func(arg string)) {
		if v, ok := kv[key]; ok {
			st, arg, _ := strings.Cut(v, ":")
			h.hooks[tune.State(st)] = func() { f(arg) }
		}
	}
	hook("cancel-at", func(string) { cancel() })
	hook("drop-carrier-at", func(string) { h.r.Station.Radio.SwitchOff() })
	hook("fail-reads-at", func(string) { h.faults.failReads = true })
	hook("fail-drive-at", func(string) { h.r.FailDrive() })
	hook("slip-at", func(arg string) {
		n, _ := strconv.ParseInt(arg, 10, 64)
		h.r.Station.Mech.Slip(n)
	})
	res := op(ctx)
	h.faults.failReads = false
	h.hooks = map[tune.State]func(){}
	if !h.r.Station.Radio.State().On {
		h.r.Station.Radio.SwitchOn()
	}
	return res
}

func (h *harness) tune(out *strings.Builder, rf bool, pos []string, kv map[string]string) {
	f := h.freq(pos[0])
	if err := h.r.Station.Radio.SetFrequency(f); err != nil {
		fmt.Fprintf(out, "radio: %v\n", err)
		return
	}
	res := h.do(kv, func(ctx context.Context) tune.Result { return h.r.Tuner.Tune(ctx, tune.Request{Freq: f, RF: rf}) })
	h.report(out, res, f)
}

func (h *harness) report(out *strings.Builder, res tune.Result, f physic.Frequency) {
	fmt.Fprintf(out, "outcome %s", res.Outcome)
	if res.Err != nil {
		fmt.Fprintf(out, ": %v", res.Err)
	}
	fmt.Fprintf(out, "\nstates %s\n", strings.Join(h.states, ">"))
	if res.Prepositioned {
		swr := "–"
		if f > 0 {
			off := h.r.Axis.Position() - h.r.Station.Mech.MotorPosition()
			best, _, err := h.r.Station.Best(Hz(f))
			if err == nil {
				d := res.PrePos - (best + off)
				swr = fmt.Sprintf("%+d steps from the best", d)
				if res.Prediction != nil && math.Abs(float64(d)) <= 3*res.Prediction.Sigma+3 {
					swr += " (within 3σ)"
				}
			}
		}
		fmt.Fprintf(out, "pre-positioned from the %s: %s\n", res.Prediction.Source, swr)
	}
	if f > 0 && (res.Outcome == tune.Tuned || res.Outcome == tune.Calibrated) {
		_, bestSWR, _ := h.r.Station.Best(Hz(f))
		got := h.r.Station.TrueSWR(Hz(f))
		verdict := "within 0.1 of the best"
		if got > bestSWR+0.1 {
			verdict = fmt.Sprintf("%.3f against the best %.3f", got, bestSWR)
		}
		fmt.Fprintf(out, "true SWR %s; frame %s\n", verdict, h.frame())
	}
	if res.RFTime == 0 && res.Outcome == tune.Positioned {
		fmt.Fprintln(out, "no RF")
	}
	for _, n := range res.Notes {
		fmt.Fprintf(out, "note: %s\n", n)
	}
	if n := h.r.Station.Mech.Stalls(); n > 0 {
		fmt.Fprintf(out, "STALLS %d\n", n)
	}
	if n := h.r.LimitViolations(); n > 0 {
		fmt.Fprintf(out, "SOFT-LIMIT CROSSINGS %d\n", n)
	}
}

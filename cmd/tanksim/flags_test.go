package main

import (
	"bytes"
	"regexp"
	"sort"
	"strings"
	"testing"

	"github.com/tankd/tankd/controller/station"
)

// numericFlag is a numeric flag of a command, the range its errors must state, and a value
// outside that range (besides NaN and the infinities, which every flag is tried with).
type numericFlag struct {
	name, rng, outside string
}

func keyRangeText(t *testing.T, key string) string {
	t.Helper()
	r, ok := station.KeyRange(key)
	if !ok {
		t.Fatalf("no range for %s", key)
	}
	return r.String()
}

// numericFlags lists every numeric flag of every command. TestNumericFlagTableIsComplete keeps
// it in step with the commands' own flag listings.
func numericFlags(t *testing.T) map[string][]numericFlag {
	freq := station.FrequencyRange().String()
	geometry := []numericFlag{
		{"turns", keyRangeText(t, "loop.turns"), "9"},
		{"diameter", keyRangeText(t, "loop.diameter_m"), "50"},
		{"conductor", keyRangeText(t, "loop.conductor_m"), "1"},
		{"spacing", keyRangeText(t, "loop.spacing_m"), "-0.1"},
		{"stray", keyRangeText(t, "loop.stray_pf"), "2000"},
		{"esr", keyRangeText(t, "loop.extra_loss_ohm"), "-1"},
		{"cmin", keyRangeText(t, "capacitor.min_pf"), "20000"},
		{"cmax", keyRangeText(t, "capacitor.max_pf"), "0"},
	}
	with := func(extra ...numericFlag) []numericFlag {
		return append(append([]numericFlag{}, geometry...), extra...)
	}
	return map[string][]numericFlag{
		"design": with(
			numericFlag{"freq", freq, "1e9"},
			numericFlag{"power", powerRange.String(), "0"},
			numericFlag{"temp", temperatureRange.String(), "200"},
		),
		"curve": with(
			numericFlag{"freq", freq, "1e9"},
			numericFlag{"width", widthRange.String(), "0"},
			numericFlag{"temp", temperatureRange.String(), "-60"},
		),
		"tune": with(
			numericFlag{"freq", freq, "50"},
			numericFlag{"history", historyRange.String(), "0"},
			numericFlag{"seed", seedRange, "-1"},
		),
		"record": with(
			numericFlag{"freq", freq, "1e8"},
			numericFlag{"seed", seedRange, "-1"},
			numericFlag{"span", sweepSpanRange.String(), "0"},
			numericFlag{"density", densityRange.String(), "101"},
		),
		"replay": {
			{"offset", offsetRange.String(), "1e6"},
			{"sigma", sigmaRange.String(), "-1"},
		},
		"bench": {
			{"n", scenariosRange.String(), "0"},
			{"seed", seedRange, "-1"},
			{"workers", workersRange.String(), "-1"},
		},
	}
}

// Every numeric flag refuses NaN, both infinities and a value outside its range with a usage
// error (exit status 2) that names the flag and states the range it accepts.
func TestEveryNumericFlagRejectsNonFiniteAndOutOfRange(t *testing.T) {
	for cmd, flags := range numericFlags(t) {
		for _, f := range flags {
			for _, v := range []string{"NaN", "Inf", "-Inf", f.outside} {
				args := []string{cmd, "-" + f.name + "=" + v}
				if cmd == "replay" {
					args = append(args, "no-such.sweep") // the flags are checked before the file is read
				}
				var out, errOut bytes.Buffer
				code := run(args, &out, &errOut)
				if code != 2 {
					t.Errorf("tanksim %s: exit %d, want 2\n%s", strings.Join(args, " "), code, errOut.String())
					continue
				}
				if !hasLineWith(errOut.String(), "-"+f.name, "want", f.rng) {
					t.Errorf("tanksim %s: no error naming -%s and its range %q:\n%s", strings.Join(args, " "), f.name, f.rng, errOut.String())
				}
				if out.Len() != 0 {
					t.Errorf("tanksim %s: printed a report despite the bad flag:\n%s", strings.Join(args, " "), out.String())
				}
			}
		}
	}
}

func hasLineWith(text string, parts ...string) bool {
	for _, line := range strings.Split(text, "\n") {
		all := true
		for _, p := range parts {
			all = all && strings.Contains(line, p)
		}
		if all {
			return true
		}
	}
	return false
}

// Every bad flag is reported at once, not only the first.
func TestBadFlagsReportedTogether(t *testing.T) {
	var out, errOut bytes.Buffer
	code := run([]string{"design", "-diameter", "NaN", "-power", "Inf", "-freq", "3750000,NaN"}, &out, &errOut)
	if code != 2 {
		t.Fatalf("exit %d, want 2", code)
	}
	for _, want := range []string{"-diameter NaN: want", "-power +Inf: want", "-freq NaN: want"} {
		if !strings.Contains(errOut.String(), want) {
			t.Errorf("error lacks %q:\n%s", want, errOut.String())
		}
	}
}

// The table above must list every numeric flag: the flags each command prints in its help,
// less the string and boolean ones, are the numeric ones.
func TestNumericFlagTableIsComplete(t *testing.T) {
	table := numericFlags(t)
	flagLine := regexp.MustCompile(`^  -([^\s]+)(?: ([^\s]+))?`)
	for _, cmd := range []string{"design", "curve", "tune", "record", "replay", "bench"} {
		var out, errOut bytes.Buffer
		if code := run([]string{cmd, "-h"}, &out, &errOut); code != 0 {
			t.Fatalf("%s -h: exit %d", cmd, code)
		}
		var help []string
		for _, line := range strings.Split(errOut.String(), "\n") {
			m := flagLine.FindStringSubmatch(line)
			if m == nil || m[2] == "string" || m[2] == "" {
				continue // a string flag, or a boolean one (no value)
			}
			help = append(help, m[1])
		}
		var listed []string
		for _, f := range table[cmd] {
			listed = append(listed, f.name)
		}
		sort.Strings(help)
		sort.Strings(listed)
		if strings.Join(help, " ") != strings.Join(listed, " ") {
			t.Errorf("%s: numeric flags in the help %v, in the test table %v", cmd, help, listed)
		}
	}
}

// The flags that set a station description's key take its range: one home for each range.
func TestGeometryFlagsTakeTheirKeysRanges(t *testing.T) {
	for _, gf := range geometryFlagKeys() {
		r, ok := station.KeyRange(gf.key)
		if !ok {
			t.Errorf("-%s sets %s, which has no range", gf.name, gf.key)
			continue
		}
		var out, errOut bytes.Buffer
		run([]string{"design", "-h"}, &out, &errOut)
		if !hasLineWith(errOut.String(), r.String()) {
			t.Errorf("-%s: the help does not state %s's range %q", gf.name, gf.key, r)
		}
	}
}

// Values inside the ranges still work, at both ends where the loop allows.
func TestNumericFlagsAcceptTheirRanges(t *testing.T) {
	for _, args := range [][]string{
		{"design", "-freq", "100000,60000000", "-power", "10000", "-temp", "-50", "-json"},
		{"design", "-band", "80m", "-power", "0.5", "-temp", "100", "-esr", "0", "-stray", "0"},
		{"design", "-turns", "8", "-diameter", "0.5", "-conductor", "0.01", "-spacing", "0.02", "-band", "20m"},
	} {
		runOK(t, args...)
	}
}

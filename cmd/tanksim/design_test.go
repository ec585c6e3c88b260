package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"regexp"
	"strings"
	"testing"
)

func TestDesignJSON(t *testing.T) {
	var out, errOut bytes.Buffer
	code := run([]string{"design", "-turns", "2", "-diameter", "2.3", "-conductor", "0.022", "-spacing", "0.1",
		"-freq", "1850000,3750000", "-power", "100", "-esr", "0", "-json"}, &out, &errOut)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut.String())
	}
	var rows []map[string]any
	if err := json.Unmarshal(out.Bytes(), &rows); err != nil {
		t.Fatalf("not a JSON array: %v\n%s", err, out.String())
	}
	if len(rows) != 2 {
		t.Fatalf("%d rows, want one per frequency", len(rows))
	}
	for _, key := range []string{"frequency_hz", "inductance_h", "capacitance_f", "q_unloaded", "q_loaded",
		"bandwidth_hz", "r_rad_ohm", "r_loss_ohm", "efficiency", "cap_voltage_v", "current_a"} {
		if _, ok := rows[0][key].(float64); !ok {
			t.Errorf("key %s missing or not a number", key)
		}
	}
	r := rows[1]
	if r["frequency_hz"].(float64) != 3750000 {
		t.Errorf("second row is %v Hz", r["frequency_hz"])
	}
	// Internal consistency of the report: Q_L = Q_u/2, BW = f/Q_L, V = √(P·X_L·Q_u) with
	// X_L = 2πfL (the circuit law), I = √(P/R).
	qu, ql := r["q_unloaded"].(float64), r["q_loaded"].(float64)
	if math.Abs(ql-qu/2) > 1e-9*qu {
		t.Errorf("Q_L %g is not Q_u/2 (%g)", ql, qu)
	}
	if bw := r["bandwidth_hz"].(float64); math.Abs(bw-3750000/ql) > 1e-6 {
		t.Errorf("bandwidth %g, want f/Q_L", bw)
	}
	xl := 2 * math.Pi * 3750000 * r["inductance_h"].(float64)
	if v := r["cap_voltage_v"].(float64); math.Abs(v-math.Sqrt(100*xl*qu)) > 1e-6*v {
		t.Errorf("capacitor voltage %g, want √(P·X_L·Q_u) = %g", v, math.Sqrt(100*xl*qu))
	}
	rtot := r["r_rad_ohm"].(float64) + r["r_loss_ohm"].(float64)
	if i := r["current_a"].(float64); math.Abs(i-math.Sqrt(100/rtot)) > 1e-9*i {
		t.Errorf("current %g, want √(P/R)", i)
	}
	// -esr 0: conductor and radiation loss only, so R_loss is the skin-effect loss alone
	// and the efficiency is R_rad/(R_rad+R_loss).
	if eff := r["efficiency"].(float64); math.Abs(eff-r["r_rad_ohm"].(float64)/rtot) > 1e-12 {
		t.Errorf("efficiency %g inconsistent", eff)
	}
	if !strings.Contains(errOut.String(), "CAUTION") {
		t.Error("no high-voltage caution with the JSON report")
	}
}

func TestDesignTextReport(t *testing.T) {
	var out, errOut bytes.Buffer
	if code := run([]string{"design", "-band", "160m,80m", "-cmax", "200"}, &out, &errOut); code != 0 {
		t.Fatalf("exit %d: %s", code, errOut.String())
	}
	text := out.String()
	for _, want := range []string{"160m  NOT covered", "80m   covered", "CAUTION", "kilovolts", "Vcap pk"} {
		if !strings.Contains(text, want) {
			t.Errorf("report lacks %q:\n%s", want, text)
		}
	}
}

func TestDesignRejectsBadInput(t *testing.T) {
	for _, args := range [][]string{
		{"design", "-turns", "9"},
		{"design", "-freq", "abc"},
		{"design", "-band", "11m"},
		{"design", "-power", "-5"},
		{"design", "stray-arg"},
	} {
		var out, errOut bytes.Buffer
		if code := run(args, &out, &errOut); code != 2 {
			t.Errorf("%v: exit %d, want 2 (usage)", args, code)
		}
		if errOut.Len() == 0 {
			t.Errorf("%v: no message", args)
		}
	}
}

// The four inputs that used to print tables of NaN or nonsense: each must now give a usage error
// naming the flag and its range, or say "not covered" and why.
func TestDesignNaNAndOutOfModelInputs(t *testing.T) {
	for _, c := range []struct {
		args []string
		code int
		want string
	}{
		{[]string{"design", "-esr", "NaN"}, 2, "-esr NaN: want 0 to 100 Ω"},
		{[]string{"design", "-temp", "NaN"}, 2, "-temp NaN: want -50 to 100 °C"},
		{[]string{"design", "-freq", "1e9"}, 2, "-freq 1e+09: want 100000 to 60000000 Hz (100 kHz to 60 MHz)"},
		// The demo loop's turn circumference is π·2.3 m = 7.23 m, a third of the 21.4 m
		// wavelength at 14 MHz (computed by hand): past a quarter, the small-loop model says
		// nothing (common practice).
		{[]string{"design", "-band", "20m"}, 0, "20m   NOT covered: the loop is too large for the small-loop model on this band"},
	} {
		var out, errOut bytes.Buffer
		code := run(c.args, &out, &errOut)
		if code != c.code {
			t.Errorf("%v: exit %d, want %d\n%s", c.args, code, c.code, errOut.String())
		}
		if got := out.String() + errOut.String(); !strings.Contains(got, c.want) {
			t.Errorf("%v: output lacks %q:\n%s", c.args, c.want, got)
		}
		if strings.Contains(out.String(), "NaN") {
			t.Errorf("%v: NaN in the report:\n%s", c.args, out.String())
		}
	}
}

// A row the model cannot answer prints its reason and no figures: no negative capacitance, no
// Q of 0, no 98 % efficiency.
func TestDesignBandBeyondTheLoopHasNoFigures(t *testing.T) {
	out, _ := runOK(t, "design", "-band", "20m")
	rows := 0
	for _, line := range strings.Split(out, "\n") {
		if !strings.HasPrefix(line, "   20m  ") { // a table row, not the band's summary line
			continue
		}
		rows++
		if !strings.Contains(line, "not covered: the loop is too large for the small-loop model here (turn circumference 0.3") {
			t.Errorf("row without its reason: %q", line)
		}
		// Past the frequency column the only digits are the circumference's, in the reason.
		fields := strings.Fields(line)
		for _, f := range fields[2:] {
			if f == "not" {
				break
			}
			if f != "–" {
				t.Errorf("a figure %q in a row the model cannot answer: %q", f, line)
			}
		}
	}
	if rows != 3 {
		t.Errorf("%d rows for 20m, want its two edges and centre:\n%s", rows, out)
	}

	js, _ := runOK(t, "design", "-band", "20m", "-json")
	var got []map[string]any
	if err := json.Unmarshal([]byte(js), &got); err != nil {
		t.Fatal(err)
	}
	for _, r := range got {
		if r["covered"] != false || !strings.Contains(r["reason"].(string), "too large for the small-loop model") {
			t.Errorf("row %v: want covered false and the reason", r)
		}
		for _, key := range []string{"capacitance_f", "q_unloaded", "q_loaded", "bandwidth_hz", "r_rad_ohm", "r_loss_ohm",
			"efficiency", "efficiency_db", "cap_voltage_v", "cap_voltage_peak_v", "current_a"} {
			if v, ok := r[key]; !ok || v != nil {
				t.Errorf("%v Hz: %s = %v, want the key kept and null", r["frequency_hz"], key, v)
			}
		}
		if r["small_loop_valid"] != false || r["capacitor_in_range"] != false {
			t.Errorf("%v Hz: small_loop_valid %v, capacitor_in_range %v", r["frequency_hz"], r["small_loop_valid"], r["capacitor_in_range"])
		}
	}
}

// A frequency the capacitor cannot reach is "not covered" with the capacitance it needs, in
// the text and in JSON; the frequency it can reach keeps every figure.
func TestDesignCapacitorOutOfReach(t *testing.T) {
	js, _ := runOK(t, "design", "-freq", "1850000,3750000", "-cmax", "300", "-json")
	var rows []map[string]any
	if err := json.Unmarshal([]byte(js), &rows); err != nil {
		t.Fatal(err)
	}
	low, ok := rows[0], rows[1]
	if low["covered"] != false || low["q_unloaded"] != nil {
		t.Errorf("1.85 MHz on a 300 pF capacitor: %v", low)
	}
	// LC resonance, f = 1/(2π√(LC)) (any circuits textbook), less the winding's own
	// capacitance and the demo station's 3 pF stray.
	l, self := low["inductance_h"].(float64), low["self_capacitance_f"].(float64)
	w := 2 * math.Pi * 1850000
	want := 1/(w*w*l) - self - 3e-12
	if c, _ := low["capacitance_f"].(float64); math.Abs(c-want) > 1e-9*want {
		t.Errorf("needed capacitance %v, want %g", low["capacitance_f"], want)
	}
	if r, _ := low["reason"].(string); !strings.Contains(r, "above the capacitor's 300 pF maximum") {
		t.Errorf("reason %q", r)
	}
	if ok["covered"] != true || ok["reason"] != nil || ok["capacitor_in_range"] != true {
		t.Errorf("3.75 MHz is within 10–300 pF: %v", ok)
	}
	for _, key := range []string{"q_unloaded", "efficiency", "cap_voltage_peak_v", "circumference_wavelengths"} {
		if _, isNum := ok[key].(float64); !isNum {
			t.Errorf("covered row: %s = %v, want a number", key, ok[key])
		}
	}

	out, _ := runOK(t, "design", "-freq", "1850000", "-cmax", "300")
	if line := "not covered: needs " + fmtPF(want*1e12) + " pF, above the capacitor's 300 pF maximum"; !strings.Contains(out, line) {
		t.Errorf("text report lacks %q:\n%s", line, out)
	}
}

// Where even the winding's own capacitance and the stray are too much, the tuning capacitance
// "needed" would be negative: the report gives the total the loop needs instead, and says when
// the winding alone is already too much, past its self-resonance.
func TestDesignBelowTheStrayAlone(t *testing.T) {
	// A one-turn 1.6 m ring of 28 mm tube holds 7 pF of its own; with 30 pF of leads it cannot
	// come down to the 31 pF or so it needs on 20 m.
	out, _ := runOK(t, "design", "-band", "20m", "-turns", "1", "-diameter", "1.6", "-conductor", "0.028", "-stray", "30", "-cmin", "5")
	for _, want := range []string{"pF across the capacitor already (the winding's own and the stray)", "20m   NOT covered: needs",
		"in all, the winding's own and the stray included", "plus the 37.0 pF across it already"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	if regexp.MustCompile(`needs -\d`).MatchString(out) || regexp.MustCompile(`\s-\d+\.\d\s+–`).MatchString(out) {
		t.Errorf("a negative capacitance in the report:\n%s", out)
	}
	// The demo's two 2.6 m turns resonate by themselves below 40 m: no capacitor helps there.
	out, _ = runOK(t, "design", "-band", "40m", "-stray", "20", "-cmin", "5", "-diameter", "2.6")
	for _, want := range []string{"the loop is past its self-resonance", "40m   NOT covered: needs", "in all, the winding's own and the stray included"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	if regexp.MustCompile(`needs -\d`).MatchString(out) || regexp.MustCompile(`\s-\d+\.\d\s+–`).MatchString(out) {
		t.Errorf("a negative capacitance in the report:\n%s", out)
	}
}

// The design example in the README must stay what the command prints.
func TestREADMEDesignExample(t *testing.T) {
	b, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(string(b), "\n")
	const prompt = "    $ go run ./cmd/tanksim design "
	for i, line := range lines {
		if !strings.HasPrefix(line, prompt) {
			continue
		}
		var want []string
		for _, l := range lines[i+1:] {
			if l != "" && !strings.HasPrefix(l, "    ") {
				break
			}
			want = append(want, strings.TrimPrefix(l, "    "))
		}
		for len(want) > 0 && want[len(want)-1] == "" {
			want = want[:len(want)-1]
		}
		args := append([]string{"design"}, strings.Fields(strings.TrimPrefix(line, prompt))...)
		out, _ := runOK(t, args...)
		got := strings.Split(out, "\n")
		if len(got) < len(want) {
			t.Fatalf("output shorter than the README's example:\n%s", out)
		}
		for j, w := range want {
			if g := strings.TrimRight(got[j], " "); g != w {
				t.Errorf("README line %d:\n want %q\n got  %q", i+2+j, w, g)
			}
		}
		return
	}
	t.Fatal("no design example in the README")
}

// The report says where the small-loop radiation resistance starts to read low (from a
// twentieth of a wavelength) and gives the winding's own capacitance and where the loop
// resonates by itself.
func TestDesignNotesAndSelfCapacitance(t *testing.T) {
	js, _ := runOK(t, "design", "-freq", "1850000,3750000", "-json")
	var rows []map[string]any
	if err := json.Unmarshal([]byte(js), &rows); err != nil {
		t.Fatal(err)
	}
	// π·2.3 m is 0.045 λ at 1.85 MHz and 0.090 λ at 3.75 MHz (computed by hand).
	if n, ok := rows[0]["note"]; ok {
		t.Errorf("1.85 MHz, under λ/20: note %v", n)
	}
	if n, _ := rows[1]["note"].(string); !strings.Contains(n, "Rrad and eff. read a few % low") {
		t.Errorf("3.75 MHz, past λ/20: note %q", n)
	}
	// The demo's two turns, 2.3 m across and 10 cm apart, hold about 26 pF of their own
	// (loop.Geometry.SelfCapacitance, checked in its package against a solution of the winding).
	if c, _ := rows[0]["self_capacitance_f"].(float64); c < 24e-12 || c > 28e-12 {
		t.Errorf("self-capacitance %v", rows[0]["self_capacitance_f"])
	}
	out, _ := runOK(t, "design", "-band", "80m")
	if !regexp.MustCompile(`the winding's own capacitance 25\.\d pF at 20 °C: self-resonant near 6\.\d MHz`).MatchString(out) {
		t.Errorf("header lacks the winding's own capacitance and its self-resonance:\n%s", out)
	}
}

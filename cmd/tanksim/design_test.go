package main

import (
	"bytes"
	"encoding/json"
	"math"
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

package config

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"
)

func TestDefaultsAreValid(t *testing.T) {
	if err := Embedded().Validate(); err != nil {
		t.Errorf("embedded default: %v", err)
	}
	// the hardware default needs the installer's pins before it is valid
	err := Default().Validate()
	if err == nil || !strings.Contains(err.Error(), "hardware.gpio.step_pin: required") {
		t.Errorf("hardware default without pins: %v", err)
	}
	if Default().Tuning.Transmit {
		t.Error("the default for real hardware keys the transmitter")
	}
	if !Embedded().Tuning.Transmit {
		t.Error("the simulator's default cannot key its imaginary radio: its demo would not tune")
	}
	if !strings.HasPrefix(Embedded().HTTP.Listen, "127.0.0.1:") {
		t.Errorf("the default listens on %q, not loopback", Embedded().HTTP.Listen)
	}
}

// Every problem is reported at once, each with its key and what is accepted.
func TestValidateNamesEveryProblem(t *testing.T) {
	c := Embedded()
	c.Tuning.TargetSWR = math.NaN()
	c.Tuning.TunePowerW = 50
	c.Tuning.MaxForwardW = 30
	c.Tuning.Settle = Duration{-time.Second}
	c.Radio.Dialect = "morse"
	c.Radio.Baud = 9601
	c.HTTP.Listen = "0.0.0.0:80"
	c.State.Dir = "relative/path"
	c.Station.Loop.Turns = 0
	err := c.Validate()
	if err == nil {
		t.Fatal("accepted")
	}
	for _, want := range []string{
		"tuning.target_swr: NaN: want 1.05 to 10",
		"tuning.tune_power_w: 50 W: want below max_forward_w (30 W)",
		"tuning.settle: -1s: want 0s to 1m0s",
		`radio.dialect: "morse": want "ascii" or "binary"`,
		"radio.baud: 9601",
		`http.listen: "0.0.0.0:80" is not a loopback address and no token_file is set`,
		`state.dir: "relative/path": want an absolute path`,
		"station.",
	} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("missing %q in:\n%v", want, err)
		}
	}
}

func TestValidateTable(t *testing.T) {
	for _, tc := range []struct {
		name string
		edit func(*Config)
		want string // "" = valid
	}{
		{"embedded", func(*Config) {}, ""},
		{"unknown backend", func(c *Config) { c.Hardware.Backend = "plc" }, `hardware.backend: "plc"`},
		{"gpio complete", gpioPins, ""},
		{"gpio pin twice", func(c *Config) { gpioPins(c); c.Hardware.GPIO.Home = "GPIO17" }, `hardware.gpio.home_pin: "GPIO17" is also hardware.gpio.step_pin`},
		{"gpio bad pin name", func(c *Config) { gpioPins(c); c.Hardware.GPIO.Dir = "17; rm" }, `hardware.gpio.dir_pin: "17; rm"`},
		{"adc same channel", func(c *Config) { gpioPins(c); c.Hardware.GPIO.ADC.Reflected = 0 }, "want two different channels"},
		{"adc address", func(c *Config) { gpioPins(c); c.Hardware.GPIO.ADC.Address = 0x20 }, "hardware.gpio.adc.address: 0x20"},
		{"transmit without a port", func(c *Config) { gpioPins(c); c.Tuning.Transmit = true }, "tuning.transmit: true with no radio.port"},
		{"transmit passive", func(c *Config) { c.Radio.Passive = true }, "tuning.transmit: true with radio.passive"},
		{"public with permission", func(c *Config) { c.HTTP.Listen = "0.0.0.0:8790"; c.HTTP.AllowPublicWithoutToken = true }, ""},
		{"bad listen", func(c *Config) { c.HTTP.Listen = "8790" }, `http.listen: "8790": want host:port`},
		{"inf power", func(c *Config) { c.Tuning.MaxForwardW = math.Inf(1) }, "tuning.max_forward_w: +Inf"},
		{"carrier limit", func(c *Config) { c.Tuning.CarrierLimit = Duration{time.Hour} }, "tuning.carrier_limit: 1h0m0s"},
		{"relative port", func(c *Config) { c.Radio.Port = "ttyUSB0" }, `radio.port: "ttyUSB0"`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c := Embedded()
			tc.edit(&c)
			err := c.Validate()
			switch {
			case tc.want == "" && err != nil:
				t.Errorf("rejected: %v", err)
			case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
				t.Errorf("got %v, want %q", err, tc.want)
			}
		})
	}
}

func gpioPins(c *Config) {
	c.Hardware.Backend = BackendGPIO
	c.Tuning.Transmit = false
	g := &c.Hardware.GPIO
	g.Step, g.Dir, g.Enable = "GPIO17", "GPIO27", "GPIO22"
}

// A token file others may read is refused; one for its owner alone is accepted.
func TestTokenFileMode(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "token")
	if err := os.WriteFile(path, []byte("s3cret\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	c := Embedded()
	c.HTTP.TokenFile = path
	if err := c.Validate(); err == nil || !strings.Contains(err.Error(), "readable by its owner only") {
		t.Errorf("mode 644: %v", err)
	}
	if err := os.Chmod(path, 0o600); err != nil {
		t.Fatal(err)
	}
	if err := c.Validate(); err != nil {
		t.Errorf("mode 600: %v", err)
	}
	c.HTTP.Listen = "192.0.2.1:8790" // not loopback, but with a token (RFC 5737 documentation address)
	if err := c.Validate(); err != nil {
		t.Errorf("public with a token: %v", err)
	}
}

// What Encode writes, Decode reads back unchanged, with every key written out.
func TestEncodeDecodeRoundTrip(t *testing.T) {
	for _, c := range []Config{Embedded(), Default()} {
		var b bytes.Buffer
		if err := Encode(&b, c); err != nil {
			t.Fatal(err)
		}
		var got Config // no defaults underneath: everything must come from the file
		if err := Decode(bytes.NewReader(b.Bytes()), &got); err != nil {
			t.Fatalf("%v\n%s", err, b.String())
		}
		if !reflect.DeepEqual(got, c) {
			t.Errorf("round trip changed the configuration:\n%+v\n%+v", got, c)
		}
		for _, key := range []string{"target_swr", "transmit", "listen", "backend", "step_pulse", "poll_interval"} {
			if !strings.Contains(b.String(), key+" = ") {
				t.Errorf("key %s not written out", key)
			}
		}
	}
}

func TestDecodeRefusesUnknownKeys(t *testing.T) {
	c := Embedded()
	err := Decode(strings.NewReader("[tuning]\ntarget_swr = 1.5\ntarget_swrr = 2\n[radioo]\nport = \"/dev/x\"\n"), &c)
	if err == nil || !strings.Contains(err.Error(), "tuning.target_swrr") || !strings.Contains(err.Error(), "radioo") {
		t.Errorf("unknown keys: %v", err)
	}
}

func TestDecodeKeepsDefaults(t *testing.T) {
	c := Embedded()
	if err := Decode(strings.NewReader("[tuning]\ntarget_swr = 1.5\nsettle = \"2s\"\n"), &c); err != nil {
		t.Fatal(err)
	}
	want := Embedded()
	want.Tuning.TargetSWR = 1.5
	want.Tuning.Settle = Duration{2 * time.Second}
	if !reflect.DeepEqual(c, want) {
		t.Errorf("got %+v", c.Tuning)
	}
	if err := Decode(strings.NewReader("[tuning]\nsettle = \"soon\"\n"), &c); err == nil {
		t.Error("accepted a duration with no unit")
	}
}

package config

import (
	"errors"
	"fmt"
	"math"
	"net"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"time"

	"github.com/tankd/tankd/controller/station"
)

// Config is the daemon's whole configuration, as one TOML file holds it (see doc.go).
type Config struct {
	Station  station.Description `toml:"station"`
	Hardware Hardware            `toml:"hardware"`
	Radio    Radio               `toml:"radio"`
	HTTP     HTTP                `toml:"http"`
	State    State               `toml:"state"`
	Tuning   Tuning              `toml:"tuning"`
}

// Backends.
const (
	BackendSim  = "sim"  // the built-in simulator: no hardware at all
	BackendGPIO = "gpio" // a stepper driver on GPIO, switches, an ADC on I2C or SPI
)

// Hardware chooses the backend and describes real hardware.
type Hardware struct {
	// Backend is BackendSim or BackendGPIO.
	Backend string `toml:"backend"`
	GPIO    GPIO   `toml:"gpio"`
}

// GPIO is a stepper driver's step, direction and enable lines, the shaft's switches, the
// converter that reads the coupler's two detectors, and the transmitter-inhibit line. Pin
// names are the board's (periph's names, e.g. "GPIO17"); an empty name is an absent line.
type GPIO struct {
	Step            string `toml:"step_pin"`
	Dir             string `toml:"dir_pin"`
	Enable          string `toml:"enable_pin"`
	EnableActiveLow bool   `toml:"enable_active_low"`
	// StepPulse is the width of a step pulse; the driver's data sheet gives the least.
	StepPulse       Duration `toml:"step_pulse"`
	Home            string   `toml:"home_pin"`
	LowerLimit      string   `toml:"lower_limit_pin"`
	UpperLimit      string   `toml:"upper_limit_pin"`
	SwitchActiveLow bool     `toml:"switch_active_low"`
	TXInhibit       string   `toml:"tx_inhibit_pin"`
	ADC             ADC      `toml:"adc"`
}

// ADC is the converter that reads the forward and reflected detectors.
type ADC struct {
	// Device is the converter's kind, e.g. "ads1115".
	Device string `toml:"device"`
	// Bus is the I2C bus (e.g. "1" or "/dev/i2c-1") or SPI port the converter sits on.
	Bus string `toml:"bus"`
	// Address is the I2C address.
	Address   int     `toml:"address"`
	Forward   int     `toml:"forward_channel"`
	Reflected int     `toml:"reflected_channel"`
	FullScale float64 `toml:"full_scale_v"`
	RateSPS   int     `toml:"rate_sps"`
}

// Dialects of the radio's CAT link.
const (
	DialectASCII  = "ascii"  // two-letter commands ended by ';'
	DialectBinary = "binary" // 0xFE 0xFE-framed binary commands
)

// Radio is the CAT link to the transceiver. With the simulator backend and no port, the daemon
// serves the simulated radio on a pseudo-terminal instead, and follows it.
type Radio struct {
	// Port is the serial device (e.g. "/dev/ttyUSB0"); empty: no CAT link.
	Port    string `toml:"port"`
	Dialect string `toml:"dialect"`
	Baud    int    `toml:"baud"`
	// Address is the radio's address on a binary-dialect bus.
	Address int `toml:"address"`
	// PollInterval is how often the frequency is asked for when the radio does not report it
	// by itself.
	PollInterval Duration `toml:"poll_interval"`
	// Passive only listens: another program owns the link and tankd never sends on it (it
	// follows the frequency, and cannot key the radio).
	Passive bool `toml:"passive"`
}

// HTTP is the API's listener.
type HTTP struct {
	// Listen is the address to listen on; loopback by default.
	Listen string `toml:"listen"`
	// TokenFile holds the bearer token that write requests must carry; empty: none. The file
	// must not be readable by group or others.
	TokenFile string `toml:"token_file"`
	// AllowPublicWithoutToken allows a non-loopback Listen address with no token: anyone who
	// can reach it could move the motor and key the transmitter.
	AllowPublicWithoutToken bool `toml:"allow_public_without_token"`
}

// State is where the daemon keeps its files.
type State struct {
	// Dir is the state directory; empty: systemd's StateDirectory, else the user's state
	// directory (~/.local/state/tankd).
	Dir string `toml:"dir"`
}

// Tuning is the tuning policy.
type Tuning struct {
	// Transmit lets the daemon key the radio's tune carrier itself. Off by default: a tune
	// then waits for the operator's carrier.
	Transmit bool `toml:"transmit"`
	// AutoTune tunes with a carrier on every frequency change the follower acts on; without it
	// a change only pre-positions from the memory map.
	AutoTune bool `toml:"auto_tune"`
	// TargetSWR is the most a verified SWR may read for a tune to count as tuned.
	TargetSWR float64 `toml:"target_swr"`
	// TunePowerW is the carrier power asked for when the daemon keys.
	TunePowerW float64 `toml:"tune_power_w"`
	// MaxForwardW ends a tune when forward power rises above it.
	MaxForwardW float64 `toml:"max_forward_w"`
	// CarrierLimit caps the carrier time of one tune.
	CarrierLimit Duration `toml:"carrier_limit"`
	// RetuneFraction: a frequency change within this fraction of the loop's bandwidth of the
	// last tune needs nothing.
	RetuneFraction float64 `toml:"retune_fraction"`
	// Settle is how long the frequency must stay put after a change within a band before the
	// loop follows it (a band change pre-positions at once).
	Settle Duration `toml:"settle"`
	// StaleAfter marks the radio's frequency stale when its source has said nothing this long.
	StaleAfter Duration `toml:"stale_after"`
}

// Duration is a time.Duration written in TOML as a string such as "500ms" or "2s".
type Duration struct{ time.Duration }

// MarshalText implements encoding.TextMarshaler.
func (d Duration) MarshalText() ([]byte, error) { return []byte(d.String()), nil }

// UnmarshalText implements encoding.TextUnmarshaler.
func (d *Duration) UnmarshalText(b []byte) error {
	v, err := time.ParseDuration(string(b))
	if err != nil {
		return fmt.Errorf("duration %q: want a number with a unit, e.g. \"500ms\" or \"2s\"", b)
	}
	d.Duration = v
	return nil
}

// Defaults.
const (
	DefaultListen = "127.0.0.1:8790"
)

// Default is the configuration for real hardware with every default filled in: the demo
// station's description until the installer writes their own, the GPIO backend, no
// transmitting, the API on loopback.
func Default() Config {
	return Config{
		Station:  station.DefaultDescription(),
		Hardware: Hardware{Backend: BackendGPIO, GPIO: GPIO{StepPulse: Duration{5 * time.Microsecond}, ADC: ADC{Device: "ads1115", Bus: "1", Address: 0x48, Forward: 0, Reflected: 1, FullScale: 4.096, RateSPS: 860}}},
		Radio:    Radio{Dialect: DialectASCII, Baud: 9600, Address: 0x94, PollInterval: Duration{250 * time.Millisecond}},
		HTTP:     HTTP{Listen: DefaultListen},
		Tuning: Tuning{
			TargetSWR: 2, TunePowerW: 5, MaxForwardW: 25, CarrierLimit: Duration{8 * time.Second},
			RetuneFraction: 0.25, Settle: Duration{500 * time.Millisecond}, StaleAfter: Duration{10 * time.Second},
		},
	}
}

// Embedded is what the daemon runs with no configuration file: the built-in simulator, whose
// imaginary radio it may key so that its demo tunes, with the API on loopback only.
func Embedded() Config {
	c := Default()
	c.Hardware.Backend = BackendSim
	c.Tuning.Transmit = true
	c.Tuning.AutoTune = true
	return c
}

// StateDir resolves the state directory: the configured one, systemd's StateDirectory, or the
// user's state directory.
func (c Config) StateDir() string {
	if c.State.Dir != "" {
		return c.State.Dir
	}
	if d := os.Getenv("STATE_DIRECTORY"); d != "" {
		// systemd may give several, separated by colons: the first is ours
		return strings.Split(d, ":")[0]
	}
	if d := os.Getenv("XDG_STATE_HOME"); d != "" {
		return filepath.Join(d, "tankd")
	}
	if h, err := os.UserHomeDir(); err == nil {
		return filepath.Join(h, ".local", "state", "tankd")
	}
	return "tankd-state"
}

// problems collects validation errors, each with its key.
type problems []error

func (p *problems) add(key string, format string, args ...any) {
	*p = append(*p, fmt.Errorf("%s: %s", key, fmt.Sprintf(format, args...)))
}

func (p *problems) number(key string, v, lo, hi float64, unit string) {
	if !(v >= lo && v <= hi) {
		p.add(key, "%v: want %s to %s%s", v, fmtNum(lo), fmtNum(hi), unit)
	}
}

func (p *problems) duration(key string, d Duration, lo, hi time.Duration) {
	if d.Duration < lo || d.Duration > hi {
		p.add(key, "%v: want %v to %v", d.Duration, lo, hi)
	}
}

func fmtNum(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// pinName is what a pin name may look like: the board's names are letters, digits, '_' and
// '-', e.g. "GPIO17", "P1_11".
var pinName = regexp.MustCompile(`^[A-Za-z][A-Za-z0-9_-]{0,31}$`)

// Validate reports every problem of the whole configuration at once, each with its key and
// what is accepted. It opens no device and touches no file but for checking that a token
// file, if named, is not readable by others.
func (c Config) Validate() error {
	var p problems
	if err := c.Station.Validate(); err != nil {
		for _, e := range unjoin(err) {
			p = append(p, fmt.Errorf("station.%w", e))
		}
	}
	c.validateHardware(&p)
	c.validateRadio(&p)
	c.validateHTTP(&p)
	c.validateTuning(&p)
	if c.State.Dir != "" && !filepath.IsAbs(c.State.Dir) {
		p.add("state.dir", "%q: want an absolute path", c.State.Dir)
	}
	return errors.Join(p...)
}

func unjoin(err error) []error {
	if j, ok := err.(interface{ Unwrap() []error }); ok {
		return j.Unwrap()
	}
	return []error{err}
}

func (c Config) validateHardware(p *problems) {
	h := c.Hardware
	switch h.Backend {
	case BackendSim:
	case BackendGPIO:
		g := h.GPIO
		pins := map[string]string{}
		pin := func(key, name string, required bool) {
			switch {
			case name == "" && required:
				p.add("hardware.gpio."+key, "required with the %s backend", BackendGPIO)
			case name == "":
			case !pinName.MatchString(name):
				p.add("hardware.gpio."+key, "%q: want a pin name such as \"GPIO17\"", name)
			case pins[name] != "":
				p.add("hardware.gpio."+key, "%q is also %s", name, pins[name])
			default:
				pins[name] = "hardware.gpio." + key
			}
		}
		pin("step_pin", g.Step, true)
		pin("dir_pin", g.Dir, true)
		pin("enable_pin", g.Enable, true)
		pin("home_pin", g.Home, false)
		pin("lower_limit_pin", g.LowerLimit, false)
		pin("upper_limit_pin", g.UpperLimit, false)
		pin("tx_inhibit_pin", g.TXInhibit, false)
		// a step/dir driver wants pulses of a microsecond or two at least (from memory of
		// common driver data sheets); a userspace generator cannot time below a few µs anyway
		p.duration("hardware.gpio.step_pulse", g.StepPulse, time.Microsecond, time.Millisecond)
		a := g.ADC
		switch a.Device {
		case "ads1115", "ads1015":
		default:
			p.add("hardware.gpio.adc.device", "%q: want ads1115 or ads1015", a.Device)
		}
		if a.Bus == "" {
			p.add("hardware.gpio.adc.bus", "required: the I2C bus, e.g. \"1\"")
		}
		// 7-bit I2C addresses; the ADS1x15 answers on 0x48 to 0x4B (its data sheet)
		if a.Address < 0x48 || a.Address > 0x4b {
			p.add("hardware.gpio.adc.address", "%#x: want 0x48 to 0x4b", a.Address)
		}
		if a.Forward < 0 || a.Forward > 3 || a.Reflected < 0 || a.Reflected > 3 || a.Forward == a.Reflected {
			p.add("hardware.gpio.adc", "forward_channel %d, reflected_channel %d: want two different channels 0 to 3", a.Forward, a.Reflected)
		}
		p.number("hardware.gpio.adc.full_scale_v", a.FullScale, 0.256, 6.144, " V")
		if a.RateSPS < 8 || a.RateSPS > 3300 {
			p.add("hardware.gpio.adc.rate_sps", "%d: want 8 to 3300 samples per second", a.RateSPS)
		}
	default:
		p.add("hardware.backend", "%q: want %q or %q", h.Backend, BackendSim, BackendGPIO)
	}
}

func (c Config) validateRadio(p *problems) {
	r := c.Radio
	switch r.Dialect {
	case DialectASCII, DialectBinary:
	default:
		p.add("radio.dialect", "%q: want %q or %q", r.Dialect, DialectASCII, DialectBinary)
	}
	switch r.Baud {
	case 1200, 2400, 4800, 9600, 19200, 38400, 57600, 115200:
	default:
		p.add("radio.baud", "%d: want 1200, 2400, 4800, 9600, 19200, 38400, 57600 or 115200", r.Baud)
	}
	// binary-dialect addresses are one byte; 0x00 is the broadcast address and 0xE0 the
	// controller's own by convention (common practice)
	if r.Address < 0x01 || r.Address > 0xdf {
		p.add("radio.address", "%#x: want 0x01 to 0xdf", r.Address)
	}
	p.duration("radio.poll_interval", r.PollInterval, 20*time.Millisecond, 10*time.Second)
	if r.Port != "" && !strings.HasPrefix(r.Port, "/") {
		p.add("radio.port", "%q: want a device path such as /dev/ttyUSB0", r.Port)
	}
}

func (c Config) validateHTTP(p *problems) {
	h := c.HTTP
	host, port, err := net.SplitHostPort(h.Listen)
	if err != nil {
		p.add("http.listen", "%q: want host:port, e.g. %q", h.Listen, DefaultListen)
		return
	}
	if n, err := strconv.Atoi(port); err != nil || n < 0 || n > 65535 {
		p.add("http.listen", "%q: port %q: want 0 to 65535", h.Listen, port)
	}
	if !loopback(host) && h.TokenFile == "" && !h.AllowPublicWithoutToken {
		p.add("http.listen", "%q is not a loopback address and no token_file is set: anyone who reaches it could move the motor and key the transmitter (set token_file, or allow_public_without_token = true)", h.Listen)
	}
	if h.TokenFile != "" {
		if !filepath.IsAbs(h.TokenFile) {
			p.add("http.token_file", "%q: want an absolute path", h.TokenFile)
		} else if err := checkTokenFile(h.TokenFile); err != nil {
			p.add("http.token_file", "%v", err)
		}
	}
}

// loopback says whether host names the loopback interface only.
func loopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// checkTokenFile refuses a token file that group or others may read.
func checkTokenFile(path string) error {
	fi, err := os.Stat(path)
	if err != nil {
		return fmt.Errorf("%q: %w", path, err)
	}
	if fi.Mode().Perm()&0o077 != 0 {
		return fmt.Errorf("%q has mode %v: a token must be readable by its owner only (chmod 600)", path, fi.Mode().Perm())
	}
	return nil
}

func (c Config) validateTuning(p *problems) {
	t := c.Tuning
	p.number("tuning.target_swr", t.TargetSWR, 1.05, 10, "")
	// a tune carrier of a few watts is common practice; the ceiling is the detectors' and the
	// transmitter's business, checked against max_forward_w
	p.number("tuning.tune_power_w", t.TunePowerW, 0.1, 100, " W")
	p.number("tuning.max_forward_w", t.MaxForwardW, 0.5, 1000, " W")
	if t.TunePowerW >= t.MaxForwardW && !math.IsNaN(t.TunePowerW) {
		p.add("tuning.tune_power_w", "%v W: want below max_forward_w (%v W)", t.TunePowerW, t.MaxForwardW)
	}
	p.duration("tuning.carrier_limit", t.CarrierLimit, 100*time.Millisecond, time.Minute)
	p.number("tuning.retune_fraction", t.RetuneFraction, 0, 5, " of the bandwidth")
	p.duration("tuning.settle", t.Settle, 0, time.Minute)
	p.duration("tuning.stale_after", t.StaleAfter, time.Second, time.Hour)
	if t.Transmit && c.Radio.Passive {
		p.add("tuning.transmit", "true with radio.passive: a passive link cannot key the radio")
	}
	if t.Transmit && c.Hardware.Backend == BackendGPIO && c.Radio.Port == "" {
		p.add("tuning.transmit", "true with no radio.port: nothing to key the radio with")
	}
}

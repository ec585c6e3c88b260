package sim

import (
	"fmt"
	"math"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/clock"
	"github.com/tankd/tankd/controller/motion"
	"github.com/tankd/tankd/controller/physics/capacitor"
	"github.com/tankd/tankd/controller/sense"
	"github.com/tankd/tankd/sim/coupler"
	"github.com/tankd/tankd/sim/env"
	"github.com/tankd/tankd/sim/mech"
	"github.com/tankd/tankd/sim/radio"
)

// Station is a whole simulated installation built from a Spec: the loop and its feed, the
// tuning capacitor, the drive train, the coupler with its detectors and ADC, the weather and
// the radio, all on one clock. It hands the controller the same interfaces real hardware
// does (a motion.Drive and switches, a sense.Sensor, a transmitter) and answers the test
// oracle's questions (the true SWR now, where the best position is) that hardware cannot.
//
// A Station is driven by one goroutine, like the hardware it stands for.
type Station struct {
	Spec    Spec
	Clock   clock.Clock
	RF      *RF
	Mech    *mech.Mechanics
	Coupler *coupler.Coupler
	Weather *env.Weather
	Radio   *radio.Radio
	sensor  *sense.Coupler
	perTurn float64
}

// NewStation builds the station on clk (a *vclock.Clock in tests and benchmarks, the wall
// clock for the real-time demo). Every random draw is seeded from s.Simulator.Seed.
func NewStation(s Spec, clk clock.Clock) (*Station, error) {
	if err := s.Validate(); err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	rf, err := s.RF()
	if err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	st := &Station{Spec: s, Clock: clk, RF: rf, perTurn: s.StepsPerTurn()}
	capOpts := rf.Capacitor().Options()
	d, sd := s.Drive, s.Simulator.Drive
	mo := mech.Options{
		Seed:        s.Simulator.Seed ^ 0x6d656368,
		StepsPerRev: d.StepsPerRev, Microsteps: d.Microsteps, GearRatio: d.GearRatio,
		Backlash: int64(math.Round(d.BacklashSteps)), RandomPlay: true,
		PulloutSpeed: sd.PulloutSpeed, MaxAccel: sd.MaxAccel, MissRate: sd.MissRate,
		SettleAmplitude: sd.SettleSteps, SettleTime: d.Settle(),
		SlipOnRelease: d.SlipOnRelease,
		Name:          "simulated drive",
	}
	if capOpts.Travel == capacitor.Stops {
		mo.HardStops, mo.StopMin, mo.StopMax = true, 0, capOpts.Span*st.perTurn
	}
	if h := d.Home; h != nil {
		mo.Home = &mech.SwitchOptions{At: h.AtTurns * st.perTurn, Side: motion.Down, Hysteresis: h.HysteresisSteps}
	}
	// Start low in the travel, 2 to 5 % of it, clear of the ends and below the presets' dips.
	// A freely turning capacitor whose position is not known is re-referenced by a search over
	// one span from where the shaft stands, which finds only the dips above it: a start higher
	// up would hide the low-capacitance dips (the top of 80 m on the demo loop) from the first
	// search of a daemon that has never run.
	mo.Start = int64(st.perTurn * capOpts.Span * (0.02 + 0.03*float64(s.Simulator.Seed%97)/97))
	if st.Mech, err = mech.New(clk, mo); err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	if st.Weather, err = env.New(s.EnvOptions()); err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	ro := s.Simulator.Radio
	f := physic.Frequency(math.Round(ro.FrequencyHz)) * physic.Hertz
	if st.Radio, err = radio.New(radio.Opts{MaxPower: physic.Power(ro.MaxPowerW * float64(physic.Watt)), FreqA: f, Mode: radio.USB, Clock: clk,
		KeyUp: keyingDelay(ro.KeyUpMS), Unkey: keyingDelay(ro.UnkeyMS)}); err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	co, err := s.CouplerOptions()
	if err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	if st.Coupler, err = coupler.New(clk, st.line, co); err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	if st.sensor, err = sense.NewCoupler(st.Coupler, st.Coupler.Calibration()); err != nil {
		return nil, fmt.Errorf("station: %w", err)
	}
	return st, nil
}

// line is what the coupler samples now: the radio's carrier and the loop's reflection at the
// radio's frequency, the shaft's position and the air temperature.
func (st *Station) line() (float64, complex128) {
	rs := st.Radio.State()
	on, p := st.Radio.Carrier() // on the antenna only once the radio has keyed up
	if !on {
		return 0, 0
	}
	f := float64(rs.Frequency()) / float64(physic.Hertz)
	return float64(p) / float64(physic.Watt), st.RF.Gamma(f, st.Mech.Shaft()/st.perTurn, st.Temperature())
}

// Sensor is the calibrated coupler, as the controller reads it.
func (st *Station) Sensor() sense.Sensor { return st.sensor }

// Temperature is the air (and loop) temperature now, °C.
func (st *Station) Temperature() float64 { return st.Weather.Temperature(st.Clock.Now()) }

// Thermometer reads the station's temperature (tune.Thermometer).
func (st *Station) Thermometer() Thermometer { return Thermometer{st} }

// Thermometer is a thermometer at the loop.
type Thermometer struct{ st *Station }

// Temperature implements tune.Thermometer.
func (t Thermometer) Temperature() (physic.Temperature, error) {
	return physic.ZeroCelsius + physic.Temperature(t.st.Temperature()*float64(physic.Kelvin)), nil
}

// TrueSWR is the SWR on the line now at frequency f (Hz) for the shaft where it stands: what a
// perfect meter would show with a carrier.
func (st *Station) TrueSWR(f float64) float64 {
	return st.RF.SWR(f, st.Mech.Shaft()/st.perTurn, st.Temperature())
}

// SWRAt is the SWR at frequency f (Hz) now with the motor at motor (the mechanism's own
// position, motor steps), approached from below with the gear play taken up: where the shaft
// would be, whether or not the motor stops there.
func (st *Station) SWRAt(f float64, motor float64) float64 {
	return st.RF.SWR(f, (motor-st.Spec.ShaftLag())/st.perTurn, st.Temperature())
}

// Best is the oracle's answer for frequency f (Hz) now: the motor position, approached from
// below with the gear play taken up, whose shaft position gives the lowest SWR, and that SWR.
// Motor positions are whole steps, so the best achievable SWR is the best over whole steps.
func (st *Station) Best(f float64) (pos motion.Steps, swr float64, err error) {
	t := st.Temperature()
	turns, ok := st.RF.DipTurns(f, t)
	if !ok {
		return 0, 0, fmt.Errorf("station: the capacitor cannot tune %.0f Hz", f)
	}
	half := st.Spec.ShaftLag()
	// Up-approach: the shaft trails the motor by half the play.
	centre := turns*st.perTurn + half
	swr = math.Inf(1)
	for p := math.Floor(centre) - 2; p <= math.Ceil(centre)+2; p++ {
		s := st.RF.SWR(f, (p-half)/st.perTurn, t)
		if s < swr {
			pos, swr = motion.Steps(p), s
		}
	}
	return pos, swr, nil
}

// keyingDelay is a station file's keying delay (ms) as radio.Opts takes it: zero there is the
// radio's default, so "at once" is said with a negative duration.
func keyingDelay(ms float64) time.Duration {
	if ms <= 0 {
		return -1
	}
	return time.Duration(ms * float64(time.Millisecond))
}

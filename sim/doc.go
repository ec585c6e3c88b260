// Package sim is the simulated station: a whole installation (loop, feed, capacitor, drive,
// coupler and ADC, weather, radio) that hands the controller the same interfaces real hardware
// does, so that the controller, its tests, its benchmark and the daemon's demo run with no
// hardware at all.
//
// A Spec is the station as it really is: a controller/station Description (the keys a real
// installation describes itself with, at the top level of the TOML) and the simulator's own
// knobs in [simulator] (how the motor misbehaves, the coupler's directivity and the ADC, the
// weather, the radio, the seed). NewStation builds a Station from a Spec on a clock; RF is the
// loop's reflection at a frequency and shaft position, the simulator's hot path, on the pure
// physics of controller/physics. The physics prior, the soft limits and every other setting the
// controller derives come from the description (controller/station), never from here: nothing
// outside sim/ and cmd/ imports this package.
//
// What the caller must do: start from DefaultSpec, a Preset or LoadSpec (which validates: every
// bad key is reported at once with its range), build the Station on a clock (sim/vclock's
// virtual clock for tests and the benchmark, controller/clock.Wall for a real-time demo), and
// drive it from one goroutine, as the hardware it stands for. Configure the controller from
// Spec.Description, or from a description of its own where the test is what happens when the
// description is wrong (sim/bench). Every random draw is seeded from Simulator.Seed: the same
// spec on the same clock gives the same run. SaveHardware and LoadHardware keep where the
// simulated motor stands between runs, as a real capacitor stays where it was left.
package sim

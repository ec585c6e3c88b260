// Package sense turns the directional coupler's detector voltages into forward and reflected
// power, and defines the Sensor the tuning controller reads.
//
// A coupler has two detectors (forward and reflected) behind a coupling factor; each detector is
// either a log amplifier (output linear in dB) or a square-law diode, read by an ADC. drivers/
// supplies the ADC, sim/ supplies a simulated one; this package holds the calibration that is the
// same for both.
package sense

// Package capacitor models the loop's variable tuning capacitor: its capacitance over shaft
// rotation (a linear law or a measured table), its travel (an air variable that turns freely and
// repeats, or a multi-turn vacuum variable between hard end stops) and its temperature drift.
// It is pure arithmetic, shared by the controller's physics prior, the simulator and the design
// calculator: no clock, no randomness, nothing that touches hardware.
//
// Shaft positions are in turns from the minimum-capacitance position; capacitances in farads;
// temperatures in °C, with the law given at 20 °C.
//
// What the caller must do: build a Capacitor with New, which validates the options (every
// problem at once) and resamples the law; a Capacitor is immutable afterwards and safe to share.
package capacitor

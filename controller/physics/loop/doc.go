// Package loop is the electrical model of a small transmitting loop, computed from its
// geometry: inductance (each turn's RF self-inductance plus Maxwell's mutual inductance of
// coaxial turns), the winding's own capacitance across the capacitor (Geometry.SelfCapacitance:
// across the gap and between the turns), radiation and conductor loss, unloaded and loaded Q,
// bandwidth, efficiency, the capacitance that resonates it, and the capacitor voltage and loop
// current at a power; and
// the coupling-loop feed that matches it to the line. It is pure arithmetic, shared by the
// controller's physics prior, the simulator and the design calculator: no clock, no randomness,
// nothing that touches hardware.
//
// All figures are SI float64 (Hz, H, F, Ω, W, V, A, m, °C). The thin-wire small-loop formulas
// hold while the turn circumference is under about a tenth of a wavelength; SmallLoopLimit
// tells. The winding's own capacitance is lumped across the capacitor, which holds while the
// frequency is well below the loop's self-resonance; within a fifth of it the capacitance the
// model asks for reads a few pF high.
//
// Capacitor voltage is given by the circuit law V = X_L·I with I = √(P/R): V_rms = √(P·X_L·Q)
// with Q the unloaded Q, and V_peak = √2·V_rms. Some handbook forms use Q = X_L/(2R) and come out
// √2 lower than V_rms; building to that figure under-rates the capacitor.
//
// What the caller must do: Validate a Model and a Feed before evaluating them (At and Ratio
// assume valid figures and return NaN or infinities otherwise).
package loop

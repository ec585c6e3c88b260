// Package station is the description of a station that the controller plans with: the loop's
// geometry and losses, its feed, the tuning capacitor, the drive (steps, gearing, nominal
// backlash, speeds, settling, an optional home switch), the coupler's calibration, how far the
// builder trusts the drawing (the tolerance of the physics prior) and the site's mean
// temperature. It is read from TOML (see configs/ for annotated examples) and is the one place
// that turns a description into the controller's settings: the soft limits, the nominal
// backlash, the axis's, the memory map's and the tuner's options, the physics prior, and the
// detectors' calibration. A real installation and the simulator describe a station the same
// way; nothing here knows about the simulator.
//
// What the caller must do: start from DefaultDescription (or a Preset), Decode or Parse the
// TOML on top of it (an unknown key is an error), and Validate it before deriving anything:
// Validate reports every bad value at once, each with its key and the range it accepts, NaN and
// the infinities included. The derived settings (SoftLimits, AxisOptions, MapOptions,
// TunerOptions, ...) assume a valid description.
//
// Units are in the key names: metres, pF, Hz, steps (motor microsteps), steps/s, ms, dB, °C.
// Motor positions are in the final-approach coordinates of controller/motion: moving up with the
// gear play taken up, the capacitor shaft trails the motor by half the play.
package station

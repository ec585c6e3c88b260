// Package config is the daemon's configuration: one strict TOML file with sections for the
// station ([station], a controller/station description), the hardware backend ([hardware]: the
// built-in simulator, or real drivers with their pins, buses and devices), the radio's CAT link
// ([radio]), the HTTP API's listener and token ([http]), the state directory ([state]) and the
// tuning policy ([tuning]: whether the daemon may key a carrier — off by default — the target
// SWR, the tune power and its limit, the carrier-time cap, when a frequency change calls for a
// retune).
//
// What the caller must do: start from Default (or Embedded, the built-in simulator, when there
// is no file), Decode the file on top of it (an unknown key is an error), then Validate the
// whole before opening any device: Validate reports every problem at once, each with its key
// and what is accepted. Encode writes a configuration back out with every default, in a form
// Decode reads back unchanged. A backend may add sections of its own by embedding Config in a
// struct of its own and decoding that.
package config

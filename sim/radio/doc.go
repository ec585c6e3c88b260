// Package radio is the simulator's transceiver: the radio whose frequency the tuning controller
// follows and whose carrier it tunes the loop on, reachable over the two common CAT dialects.
//
// A Radio holds two VFOs, the VFO in use, the mode, the output power setting (up to a
// configurable maximum) and the transmit state. It tunes only inside its bands (the amateur
// bands from 160 m to 10 m by default) or, with general coverage, anywhere a receiver would,
// and it transmits only inside its bands; a refused change fails with a sentinel error such as
// ErrOutOfBand, and over CAT with the dialect's refusal. Key and Unkey drive a steady tune
// carrier at a given power, as the radio's tune button does: that is what a controller
// configured to transmit uses. PTT by CAT puts no carrier on the air in SSB, CW or data modes,
// because no audio or key reaches the simulated radio. Carrier reports what a directional
// coupler at the antenna would see: on a radio given a Clock, the carrier reaches the antenna
// only a key-up time after the key (the T/R relays switch first) and lingers an unkey time after
// the unkey, as a real radio's does, so that a controller pays for every key it makes. Subscribe
// delivers changes without ever blocking the radio.
//
// ServeASCII and ServeBinary answer the ASCII dialect (two-letter commands ended by ';') and the
// binary dialect (addressed frames of packed BCD) on any io.ReadWriter, with unsolicited
// reports when enabled, and seeded fault knobs (dropped, corrupted or delayed frames) for
// testing controllers; SwitchOff makes the radio answer nothing at all. The codec itself is
// drivers/cat/wire, shared with the real CAT client. Pipe is an in-memory serial link and
// OpenPTY a pseudo-terminal whose slave device a real serial-port client can open.
//
// What the caller must do: run each Serve call in a goroutine it owns and end it by cancelling
// its context (or closing the link), then wait for it to return; Close every Subscription; and
// Halt the radio on the way out, like any other resource.
package radio

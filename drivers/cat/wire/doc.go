// Package wire encodes and decodes the two common radio CAT dialects, in both directions: what a
// controller sends to a radio and what the radio answers or announces on its own. It does no I/O.
// The simulated radio (sim/radio) and the serial CAT client (drivers/cat) share it, so that both
// ends of a link agree on every byte.
//
// # The ASCII dialect
//
// A command is two upper-case letters, optional parameters and a terminating ';'. The same frame
// travels both ways: "FA;" asks for the frequency of VFO A, "FA00014074000;" sets it (controller
// to radio) or reports it (radio to controller). Set commands are not acknowledged; a radio
// answers a frame it does not understand, or refuses, with "?;". Frequencies are a fixed-width
// field of decimal digits in hertz, 11 digits wide on many radios and 9 on others (ASCIIOpts).
// With auto-information on, the radio sends frequency, mode and status frames unprompted when its
// state changes. The status record answered to "IF;" has the fixed layout described at Status.
//
// SplitASCII is a bufio.SplitFunc that cuts a byte stream into frames; ParseASCII and AppendASCII
// convert between one frame and an ASCIIMsg.
//
// # The binary dialect
//
// A frame is 0xFE 0xFE <to> <from> <command> [<sub-command>] [data...] 0xFD on a bus that all
// devices share. Controllers conventionally use address 0xE0, each radio has a configurable
// address of its own, and 0x00 is the broadcast address a radio sends to in "transceive" mode
// when its frequency or mode is changed at the front panel. Frequencies are five bytes of packed
// BCD, least significant byte first; the power level is two bytes of BCD, most significant byte
// first. A radio acknowledges a set command with command 0xFB and refuses with 0xFA.
//
// SplitBinary is a bufio.SplitFunc that finds frames in a byte stream and resynchronises after
// garbage or a collision; ParseBinaryFrame checks a frame's envelope, DecodeBinary interprets its
// command, and AppendBinary encodes a BinaryMsg. EncodeBCD and DecodeBCD are the packed-BCD
// primitives.
//
// # Errors
//
// Every error wraps one of the sentinels ErrMalformed, ErrUnknown, ErrRange or ErrNotBCD, so that
// callers can tell "answer with an error frame" from "drop it" with errors.Is.
//
// What the caller must do: read from the link through a bufio.Scanner using the matching split
// function, and pass each token to the matching parser. The codec holds no state; a controller
// on the binary bus must skip the echo of its own frames (the From address tells them apart).
package wire

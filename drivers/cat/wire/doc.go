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
// # Noise and resynchronisation
//
// Serial links pick up noise: a radio powering up, a cable plugged in, a collision on the
// binary bus. The split functions drop it and find the next frame by themselves:
//
//   - ASCII: every ';' ends a token, and line ends, blanks and NULs before a frame are skipped.
//     Noise that runs MaxASCIIFrame bytes from where a frame would start without a ';' is
//     dropped, window after window of MaxASCIIFrame bytes; what is left of it, up to and
//     including the next ';', comes out as one token that seldom parses (a radio answers such a
//     token "?;"). A frame that follows a ';', the end of the frame or of the noise before it, comes
//     out intact; a frame that noise runs straight into is lost with the noise, since nothing
//     tells where the one ends and the other begins.
//   - Binary: two preamble bytes start a frame wherever they appear, so a frame comes out
//     intact after any noise. Bytes before a preamble, extra preamble bytes, a frame cut short
//     by a new preamble, and frames holding a jam byte, shorter than an empty command or
//     longer than MaxBinaryFrame are dropped.
//
// Both return each complete frame as soon as they are given it: they drop noise and go on to
// the frame after it in the same call, so a bufio.Scanner does not wait for more input while a
// frame sits in its buffer, however much noise came first and however the reads cut the stream.
// The tokens are the same for every way of cutting it. Neither asks the Scanner to hold back
// more than MaxASCIIFrame-1 or MaxBinaryFrame-1 bytes, so a flood of noise costs time, never
// memory, and a Scanner buffer of one frame's length is enough.
//
// # Errors
//
// Every error wraps one of the sentinels ErrMalformed, ErrUnknown, ErrRange or ErrNotBCD, so that
// callers can tell "answer with an error frame" from "drop it" with errors.Is.
//
// What the caller must do: read from the link through a bufio.Scanner using the matching split
// function (with bufio's default buffer, or one of at least MaxASCIIFrame or MaxBinaryFrame
// bytes), and pass each token to the matching parser. The codec holds no state; a controller
// on the binary bus must skip the echo of its own frames (the From address tells them apart).
package wire

package wire

import "errors"

// Sentinel errors. Every error the package returns wraps exactly one of them.
var (
	// ErrMalformed: the bytes are not a well-formed frame or message of the dialect (bad
	// framing, wrong parameter length, characters where digits belong).
	ErrMalformed = errors.New("malformed frame")
	// ErrUnknown: the frame is well formed but its command is not one this codec knows.
	ErrUnknown = errors.New("unknown command")
	// ErrRange: a value does not fit its field (a frequency wider than the digit field, a
	// power above 999 W, a level above 255).
	ErrRange = errors.New("value out of range")
	// ErrNotBCD: a packed-BCD byte has a nibble above 9.
	ErrNotBCD = errors.New("not packed BCD")
)

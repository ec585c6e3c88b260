package store

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
)

// sumPrefix starts the checksum line; sumLineLen is that line's length, newline included.
const (
	sumPrefix  = "sha256 "
	sumLineLen = len(sumPrefix) + 2*sha256.Size + 1
)

// AppendChecksum appends to b the checksum line over all of b, "sha256 " and 64 lower-case hex
// digits and a newline, and returns the extended slice, as the strconv Append functions do.
// b must be empty or end in a newline, or the result will not pass Verify: the checksum is a
// line of its own.
func AppendChecksum(b []byte) []byte {
	sum := sha256.Sum256(b)
	b = append(b, sumPrefix...)
	b = hex.AppendEncode(b, sum[:])
	return append(b, '\n')
}

// Verify checks that data is a body followed by its checksum line, as AppendChecksum makes it,
// and returns the body, a sub-slice of data capped so that appending to it cannot overwrite the
// checksum line. Anything else (torn, truncated, extended or edited data) is an error wrapping
// ErrCorrupt. Verify is the pure half of ReadFile.
func Verify(data []byte) ([]byte, error) {
	if len(data) == 0 || data[len(data)-1] != '\n' {
		return nil, fmt.Errorf("%w: truncated (no final newline)", ErrCorrupt)
	}
	n := len(data) - sumLineLen
	if n < 0 || !bytes.HasPrefix(data[n:], []byte(sumPrefix)) || (n > 0 && data[n-1] != '\n') {
		return nil, fmt.Errorf("%w: truncated (no checksum line)", ErrCorrupt)
	}
	body := data[:n:n]
	sum := sha256.Sum256(body)
	var want [2 * sha256.Size]byte
	hex.Encode(want[:], sum[:])
	if !bytes.Equal(data[n+len(sumPrefix):len(data)-1], want[:]) {
		return nil, fmt.Errorf("%w: checksum mismatch", ErrCorrupt)
	}
	return body, nil
}

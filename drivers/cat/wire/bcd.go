package wire

import "fmt"

// BCDOrder says which end of a packed-BCD field holds the least significant pair of digits.
type BCDOrder uint8

const (
	// LowFirst puts the two least significant digits in the first byte: the binary dialect's
	// frequency fields.
	LowFirst BCDOrder = iota
	// HighFirst puts the two most significant digits in the first byte: the binary dialect's
	// level fields.
	HighFirst
)

// maxBCDBytes is the widest field that fits a uint64 in every case (20 digits would overflow).
const maxBCDBytes = 9

// EncodeBCD writes v into dst as packed BCD, two decimal digits per byte, the high digit in the
// high nibble, filling all of dst with leading zeros. It fails with ErrRange if v needs more
// than 2·len(dst) digits or dst is longer than 9 bytes.
func EncodeBCD(dst []byte, v uint64, o BCDOrder) error {
	if len(dst) > maxBCDBytes {
		return fmt.Errorf("encode bcd: %d-byte field: %w", len(dst), ErrRange)
	}
	x := v
	for i := range dst {
		b := byte(x%10) | byte(x/10%10)<<4
		x /= 100
		if o == HighFirst {
			dst[len(dst)-1-i] = b
		} else {
			dst[i] = b
		}
	}
	if x != 0 {
		return fmt.Errorf("encode bcd: %d does not fit %d digits: %w", v, 2*len(dst), ErrRange)
	}
	return nil
}

// DecodeBCD reads a packed-BCD field. It fails with ErrNotBCD if any nibble is above 9, and with
// ErrRange if b is longer than 9 bytes.
func DecodeBCD(b []byte, o BCDOrder) (uint64, error) {
	if len(b) > maxBCDBytes {
		return 0, fmt.Errorf("decode bcd: %d-byte field: %w", len(b), ErrRange)
	}
	var v uint64
	for i := range b {
		x := b[i]
		if o == LowFirst {
			x = b[len(b)-1-i]
		}
		hi, lo := x>>4, x&0x0f
		if hi > 9 || lo > 9 {
			return 0, fmt.Errorf("decode bcd: byte %#02x: %w", x, ErrNotBCD)
		}
		v = v*100 + uint64(hi)*10 + uint64(lo)
	}
	return v, nil
}

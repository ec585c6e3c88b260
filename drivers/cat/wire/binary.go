package wire

import (
	"fmt"

	"periph.io/x/conn/v3/physic"
)

// Conventional addresses on the binary bus.
const (
	AddrBroadcast  byte = 0x00 // "to everyone": a radio's unsolicited transceive frames
	AddrController byte = 0xE0 // the usual address of a computer on the bus
)

// Framing bytes of the binary dialect. None of them may appear inside a frame.
const (
	binPreamble byte = 0xFE
	binEnd      byte = 0xFD
	binJam      byte = 0xFC // sent by a device that detected a collision on the bus
)

// MaxBinaryFrame is the longest frame SplitBinary accepts; a preamble followed by this many
// bytes without an end byte is noise.
const MaxBinaryFrame = 64

// minBinaryFrame is preamble (2), to, from, command, end.
const minBinaryFrame = 6

// BinaryFrame is one frame's envelope: addresses, command byte and everything between the
// command and the end byte (sub-command included).
type BinaryFrame struct {
	To, From byte
	Cmd      byte
	Data     []byte // aliases the parsed bytes
}

// SplitBinary is a bufio.SplitFunc that returns one frame per token, from the two preamble bytes
// to the end byte. It resynchronises on garbage: bytes before a preamble are skipped, extra
// preamble bytes are absorbed, a frame broken by a new preamble is abandoned for the new one,
// and frames containing a collision (jam) byte, shorter than an empty command or longer than
// MaxBinaryFrame are dropped. Every token it returns passes ParseBinaryFrame.
//
// Like SplitASCII it drops all the noise it holds and returns the frame after it in one call,
// so that a bufio.Scanner never reads again with a frame in its buffer, and it never asks to
// keep more than MaxBinaryFrame-1 bytes.
func SplitBinary(data []byte, atEOF bool) (advance int, token []byte, err error) {
	i := 0
	for {
		j := indexByteFrom(data, binPreamble, i)
		if j < 0 {
			return len(data), nil, nil
		}
		if j+1 >= len(data) {
			return needMore(data, j, atEOF)
		}
		if data[j+1] != binPreamble {
			i = j + 1
			continue
		}
		k := j
		for k+2 < len(data) && data[k+2] == binPreamble {
			k++
		}
		if k+2 >= len(data) {
			return needMore(data, k, atEOF)
		}
		resync := -1
		for m := k + 2; m < len(data); m++ {
			c := data[m]
			switch {
			case c == binEnd:
				if m+1-k < minBinaryFrame {
					resync = m + 1
				} else {
					return m + 1, data[k : m+1], nil
				}
			case c == binPreamble:
				resync = m
			case c == binJam:
				resync = m + 1
			case m+1-k >= MaxBinaryFrame:
				resync = m
			}
			if resync >= 0 {
				break
			}
		}
		if resync < 0 {
			return needMore(data, k, atEOF)
		}
		i = resync
	}
}

// needMore keeps data[from:] for the next call, or drops it at end of input.
func needMore(data []byte, from int, atEOF bool) (int, []byte, error) {
	if atEOF {
		return len(data), nil, nil
	}
	return from, nil, nil
}

func indexByteFrom(b []byte, c byte, from int) int {
	for i := from; i < len(b); i++ {
		if b[i] == c {
			return i
		}
	}
	return -1
}

// ParseBinaryFrame checks one frame's envelope: two preamble bytes, addresses and command, the
// end byte, and no framing byte in between. It fails with ErrMalformed.
func ParseBinaryFrame(b []byte) (BinaryFrame, error) {
	bad := func(why string) (BinaryFrame, error) {
		return BinaryFrame{}, fmt.Errorf("parse binary frame % x: %s: %w", clip(b), why, ErrMalformed)
	}
	if len(b) < minBinaryFrame {
		return bad("too short")
	}
	if b[0] != binPreamble || b[1] != binPreamble {
		return bad("no preamble")
	}
	last := len(b) - 1
	if b[last] != binEnd {
		return bad("no end byte")
	}
	for _, c := range b[2:last] {
		if c == binPreamble || c == binEnd || c == binJam {
			return bad(fmt.Sprintf("framing byte %#02x inside the frame", c))
		}
	}
	return BinaryFrame{To: b[2], From: b[3], Cmd: b[4], Data: b[5:last]}, nil
}

// AppendBinaryFrame appends f as a frame. It fails with ErrRange if a field holds a framing byte.
func AppendBinaryFrame(dst []byte, f BinaryFrame) ([]byte, error) {
	check := func(c byte) bool { return c == binPreamble || c == binEnd || c == binJam }
	if check(f.To) || check(f.From) || check(f.Cmd) {
		return dst, fmt.Errorf("format binary frame: framing byte in address or command: %w", ErrRange)
	}
	for _, c := range f.Data {
		if check(c) {
			return dst, fmt.Errorf("format binary frame: framing byte %#02x in data: %w", c, ErrRange)
		}
	}
	if len(f.Data)+minBinaryFrame > MaxBinaryFrame {
		return dst, fmt.Errorf("format binary frame: %d data bytes: %w", len(f.Data), ErrRange)
	}
	dst = append(dst, binPreamble, binPreamble, f.To, f.From, f.Cmd)
	dst = append(dst, f.Data...)
	return append(dst, binEnd), nil
}

// BinaryCmd is a command of the binary dialect: the command byte in the high byte and, for the
// commands that have one, the sub-command in the low byte (zero otherwise).
type BinaryCmd uint16

// The binary-dialect commands this codec knows, from memory of the radios' published
// references.
const (
	BinTransceiveFreq BinaryCmd = 0x0000 // radio → all: the frequency changed
	BinTransceiveMode BinaryCmd = 0x0100 // radio → all: the mode changed
	BinReadFreq       BinaryCmd = 0x0300 // query, or the answer carrying the frequency
	BinReadMode       BinaryCmd = 0x0400 // query, or the answer carrying mode and filter
	BinSetFreq        BinaryCmd = 0x0500 // set the frequency of the VFO in use
	BinSetMode        BinaryCmd = 0x0600 // set the mode, optionally the filter
	BinSelectVFO      BinaryCmd = 0x0700 // use VFO A (data 0x00) or B (0x01)
	BinPower          BinaryCmd = 0x140A // RF power level: query, set or answer
	BinID             BinaryCmd = 0x1900 // transceiver address: query or answer
	BinPTT            BinaryCmd = 0x1C00 // transmit state: query, set or answer
	BinOK             BinaryCmd = 0xFB00 // the radio accepted the last command
	BinNG             BinaryCmd = 0xFA00 // the radio did not accept the last command
)

// hasSub says which command bytes are followed by a sub-command byte.
func hasSub(cmd byte) bool { return cmd == 0x14 || cmd == 0x19 || cmd == 0x1C }

// Command returns the command byte.
func (c BinaryCmd) Command() byte { return byte(c >> 8) }

// Sub returns the sub-command byte and whether the command has one.
func (c BinaryCmd) Sub() (byte, bool) { return byte(c), hasSub(c.Command()) }

// String formats the command as hex bytes, e.g. "14 0a".
func (c BinaryCmd) String() string {
	if s, ok := c.Sub(); ok {
		return fmt.Sprintf("%02x %02x", c.Command(), s)
	}
	return fmt.Sprintf("%02x", c.Command())
}

// BinaryMode is a mode byte of the binary dialect.
type BinaryMode uint8

// Mode bytes of the binary dialect, from memory of the radios' published references.
const (
	BinLSB   BinaryMode = 0x00
	BinUSB   BinaryMode = 0x01
	BinAM    BinaryMode = 0x02
	BinCW    BinaryMode = 0x03
	BinRTTY  BinaryMode = 0x04
	BinFM    BinaryMode = 0x05
	BinWFM   BinaryMode = 0x06
	BinCWR   BinaryMode = 0x07 // CW on the opposite sideband
	BinRTTYR BinaryMode = 0x08 // RTTY with reversed shift
)

// MaxLevel is the top of the binary dialect's level scale: the power level is 0 to 255 of the
// radio's full output, carried as four BCD digits "0000" to "0255".
const MaxLevel = 255

// binFreqBytes is the width of a frequency field: ten digits, 1 Hz to 9.999 999 999 GHz.
const binFreqBytes = 5

// BinaryMsg is one binary-dialect frame, decoded. Cmd says which fields carry meaning; the rest
// are zero after DecodeBinary and ignored by AppendBinary.
type BinaryMsg struct {
	To, From byte
	Cmd      BinaryCmd
	// Query marks the data-less form of a reading command (BinReadFreq, BinReadMode,
	// BinPower, BinPTT, BinID). The same commands with data are answers, or for BinPower and
	// BinPTT also set commands: the direction is in the addresses.
	Query bool

	Freq   physic.Frequency // BinTransceiveFreq, BinReadFreq, BinSetFreq: whole hertz
	Mode   BinaryMode       // BinTransceiveMode, BinReadMode, BinSetMode
	Filter uint8            // with Mode: filter number 1 to 3, or 0 when the frame has none
	Level  uint8            // BinPower: 0 to MaxLevel
	TX     bool             // BinPTT
	VFO    VFO              // BinSelectVFO: VFOA or VFOB
	Addr   byte             // BinID: the transceiver's address
}

// ParseBinary is ParseBinaryFrame followed by DecodeBinary.
func ParseBinary(b []byte) (BinaryMsg, error) {
	f, err := ParseBinaryFrame(b)
	if err != nil {
		return BinaryMsg{}, err
	}
	return DecodeBinary(f)
}

// DecodeBinary interprets a frame's command and data. A command it does not know fails with
// ErrUnknown, data of the wrong length or content with ErrMalformed, bad BCD with ErrNotBCD.
func DecodeBinary(f BinaryFrame) (BinaryMsg, error) {
	m := BinaryMsg{To: f.To, From: f.From, Cmd: BinaryCmd(f.Cmd) << 8}
	data := f.Data
	bad := func(why string, sentinel error) (BinaryMsg, error) {
		return BinaryMsg{}, fmt.Errorf("decode binary command %02x % x: %s: %w", f.Cmd, f.Data, why, sentinel)
	}
	if hasSub(f.Cmd) {
		if len(data) == 0 {
			return bad("no sub-command", ErrMalformed)
		}
		m.Cmd |= BinaryCmd(data[0])
		data = data[1:]
	}
	wantLen := func(ns ...int) bool {
		for _, n := range ns {
			if len(data) == n {
				return true
			}
		}
		return false
	}
	switch m.Cmd {
	case BinReadFreq, BinReadMode, BinPower, BinPTT, BinID:
		if len(data) == 0 {
			m.Query = true
			return m, nil
		}
	}
	switch m.Cmd {
	case BinTransceiveFreq, BinReadFreq, BinSetFreq:
		if !wantLen(binFreqBytes) {
			return bad("frequency is not 5 bytes", ErrMalformed)
		}
		hz, err := DecodeBCD(data, LowFirst)
		if err != nil {
			return bad("frequency", err)
		}
		if m.Freq, err = hzToFreq(hz); err != nil {
			return bad("frequency", err)
		}
	case BinTransceiveMode, BinReadMode, BinSetMode:
		if !wantLen(1, 2) {
			return bad("mode is not 1 or 2 bytes", ErrMalformed)
		}
		m.Mode = BinaryMode(data[0])
		if len(data) == 2 {
			if data[1] == 0 {
				return bad("filter 0", ErrMalformed)
			}
			m.Filter = data[1]
		}
	case BinSelectVFO:
		if !wantLen(1) || data[0] > byte(VFOB) {
			return bad("VFO is not 0x00 or 0x01", ErrMalformed)
		}
		m.VFO = VFO(data[0])
	case BinPower:
		if !wantLen(2) {
			return bad("level is not 2 bytes", ErrMalformed)
		}
		v, err := DecodeBCD(data, HighFirst)
		if err != nil {
			return bad("level", err)
		}
		if v > MaxLevel {
			return bad(fmt.Sprintf("level %d above %d", v, MaxLevel), ErrRange)
		}
		m.Level = uint8(v)
	case BinPTT:
		if !wantLen(1) || data[0] > 1 {
			return bad("transmit state is not 0x00 or 0x01", ErrMalformed)
		}
		m.TX = data[0] == 1
	case BinID:
		if !wantLen(1) {
			return bad("address is not 1 byte", ErrMalformed)
		}
		m.Addr = data[0]
	case BinOK, BinNG:
		if !wantLen(0) {
			return bad("acknowledgement carries data", ErrMalformed)
		}
	default:
		return bad("command", ErrUnknown)
	}
	return m, nil
}

// AppendBinary encodes m as a frame and appends it to dst. It fails with ErrUnknown for a command
// the codec does not know and with ErrRange for values the frame cannot carry.
func AppendBinary(dst []byte, m BinaryMsg) ([]byte, error) {
	bad := func(why string, sentinel error) ([]byte, error) {
		return dst, fmt.Errorf("encode binary command %s: %s: %w", m.Cmd, why, sentinel)
	}
	f := BinaryFrame{To: m.To, From: m.From, Cmd: m.Cmd.Command()}
	var buf [8]byte
	data := buf[:0]
	if sub, ok := m.Cmd.Sub(); ok {
		data = append(data, sub)
	} else if sub != 0 {
		return bad("sub-command on a command without one", ErrUnknown)
	}
	if m.Query {
		switch m.Cmd {
		case BinReadFreq, BinReadMode, BinPower, BinPTT, BinID:
			f.Data = data
			return AppendBinaryFrame(dst, f)
		}
		return bad("has no query form", ErrMalformed)
	}
	switch m.Cmd {
	case BinTransceiveFreq, BinReadFreq, BinSetFreq:
		hz, err := freqToHz(m.Freq, 2*binFreqBytes)
		if err != nil {
			return bad("frequency", err)
		}
		data = data[:len(data)+binFreqBytes]
		if err := EncodeBCD(data[len(data)-binFreqBytes:], hz, LowFirst); err != nil {
			return bad("frequency", err)
		}
	case BinTransceiveMode, BinReadMode, BinSetMode:
		data = append(data, byte(m.Mode))
		if m.Filter != 0 {
			data = append(data, m.Filter)
		}
	case BinSelectVFO:
		if m.VFO > VFOB {
			return bad(fmt.Sprintf("VFO %d", m.VFO), ErrRange)
		}
		data = append(data, byte(m.VFO))
	case BinPower:
		data = data[:len(data)+2]
		// A uint8 is never above MaxLevel and always fits four digits.
		_ = EncodeBCD(data[len(data)-2:], uint64(m.Level), HighFirst)
	case BinPTT:
		tx := byte(0)
		if m.TX {
			tx = 1
		}
		data = append(data, tx)
	case BinID:
		data = append(data, m.Addr)
	case BinOK, BinNG:
	default:
		return bad("command", ErrUnknown)
	}
	f.Data = data
	return AppendBinaryFrame(dst, f)
}

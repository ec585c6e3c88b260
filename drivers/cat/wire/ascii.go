package wire

import (
	"bytes"
	"errors"
	"fmt"

	"periph.io/x/conn/v3/physic"
)

// ASCIICmd is the two-letter command of an ASCII-dialect frame.
type ASCIICmd string

// The ASCII-dialect commands this codec knows.
const (
	CmdFreqA    ASCIICmd = "FA" // frequency of VFO A: query, set, answer
	CmdFreqB    ASCIICmd = "FB" // frequency of VFO B: query, set, answer
	CmdMode     ASCIICmd = "MD" // operating mode: query, set, answer
	CmdVFO      ASCIICmd = "FR" // which VFO is in use: query, set, answer
	CmdTransmit ASCIICmd = "TX" // start transmitting
	CmdReceive  ASCIICmd = "RX" // stop transmitting
	CmdStatus   ASCIICmd = "IF" // status record: query, answer
	CmdAutoInfo ASCIICmd = "AI" // unsolicited reports on or off: query, set, answer
	CmdPower    ASCIICmd = "PC" // output power setting in watts: query, set, answer
	CmdID       ASCIICmd = "ID" // model number: query, answer
	CmdError    ASCIICmd = "?"  // the radio's "not understood or refused" answer
)

// ASCIIMode is a mode code of the ASCII dialect: one decimal digit.
type ASCIIMode uint8

// Mode codes of the ASCII dialect, from memory of the radios' published command references
// (0 and 8 are unused there).
const (
	ASCIILSB  ASCIIMode = 1
	ASCIIUSB  ASCIIMode = 2
	ASCIICW   ASCIIMode = 3
	ASCIIFM   ASCIIMode = 4
	ASCIIAM   ASCIIMode = 5
	ASCIIFSK  ASCIIMode = 6 // frequency-shift keying, the dialect's data mode
	ASCIICWR  ASCIIMode = 7 // CW on the opposite sideband
	ASCIIFSKR ASCIIMode = 9 // FSK with reversed shift
)

// VFO names a VFO, or the memory channel in place of a VFO.
type VFO uint8

// The VFO selections shared by both dialects.
const (
	VFOA VFO = iota
	VFOB
	VFOMemory // ASCII dialect only: the radio is on a memory channel
)

// TXSource is what a TX command asks the radio to transmit from.
type TXSource uint8

// TX sources. The digit forms are from memory of the radios' published command references.
const (
	TXDefault TXSource = iota // "TX;": the radio's ordinary send (microphone input)
	TXVoice                   // "TX0;": microphone input
	TXData                    // "TX1;": the data (accessory or USB audio) input
	TXTune                    // "TX2;": the tune carrier
)

// MaxASCIIFrame is the longest frame SplitASCII returns. The longest real frame is the 38-byte
// status record; anything that runs this long without a ';' is line noise.
const MaxASCIIFrame = 64

// ASCIIOpts are the per-radio variations of the ASCII dialect.
type ASCIIOpts struct {
	// FreqDigits is the width of every frequency field, 8 to 11 digits. Default 11; many
	// radios use 9.
	FreqDigits int
	// IDDigits is the width of the ID answer, 3 or 4 digits. Default 3.
	IDDigits int
}

// resolve fills in defaults and checks the ranges.
func (o ASCIIOpts) resolve() (ASCIIOpts, error) {
	if o.FreqDigits == 0 {
		o.FreqDigits = 11
	}
	if o.IDDigits == 0 {
		o.IDDigits = 3
	}
	var errs []error
	if o.FreqDigits < 8 || o.FreqDigits > 11 {
		errs = append(errs, fmt.Errorf("FreqDigits = %d, want 8 to 11: %w", o.FreqDigits, ErrRange))
	}
	if o.IDDigits < 3 || o.IDDigits > 4 {
		errs = append(errs, fmt.Errorf("IDDigits = %d, want 3 or 4: %w", o.IDDigits, ErrRange))
	}
	if err := errors.Join(errs...); err != nil {
		return o, fmt.Errorf("ascii options: %w", err)
	}
	return o, nil
}

// Validate reports every out-of-range option at once.
func (o ASCIIOpts) Validate() error {
	_, err := o.resolve()
	return err
}

// ASCIIMsg is one ASCII-dialect frame. Cmd says which of the other fields carry meaning; the
// rest are zero after ParseASCII and ignored by AppendASCII.
type ASCIIMsg struct {
	Cmd ASCIICmd
	// Query marks the bare form of a reading command ("FA;", "MD;", "FR;", "IF;", "AI;", "PC;",
	// "ID;"). TX, RX and "?" have no query form and leave it false.
	Query bool

	Freq     physic.Frequency // FA, FB: whole hertz
	Mode     ASCIIMode        // MD
	VFO      VFO              // FR: VFOA or VFOB
	TX       TXSource         // TX
	AutoInfo uint8            // AI: 0 off; 1 to 3 on (radios differ in what each level sends)
	Power    physic.Power     // PC: whole watts, 0 to 999
	ID       uint16           // ID: the model number
	Status   Status           // IF answer
}

// Status is the record a radio answers to "IF;". Its layout after the two command letters, for a
// frequency field W digits wide (ASCIIOpts.FreqDigits), is:
//
//	offset  width  field
//	0       W      Freq: frequency of the VFO in use, hertz, zero-padded
//	W       5      frequency step: blanks when sent, ignored when read
//	W+5     5      Offset: RIT/XIT offset, sign and 4 digits, hertz
//	W+10    1      RIT: 1 on, 0 off
//	W+11    1      XIT: 1 on, 0 off
//	W+12    3      Memory: memory channel, 000 to 999
//	W+15    1      TX: 1 transmitting, 0 receiving
//	W+16    1      Mode: mode code as in MD
//	W+17    1      VFO: 0 A, 1 B, 2 memory
//	W+18    1      Scan: 1 on, 0 off
//	W+19    1      Split: 1 on, 0 off
//	W+20    1      Tone: 0 off, other digits name the radio's tone functions
//	W+21    2      ToneNumber: 00 to 99
//	W+23    1      reserved: blank when sent, ignored when read
//
// and the terminating ';'. With W = 11 the frame is 38 bytes long. The layout is the 11-digit
// radios' record as recalled from their published references; a 9-digit radio using this codec
// keeps the same fields after a narrower frequency.
type Status struct {
	Freq       physic.Frequency
	Offset     int16 // hertz, -9999 to 9999
	RIT, XIT   bool
	Memory     uint16
	TX         bool
	Mode       ASCIIMode
	VFO        VFO
	Scan       bool
	Split      bool
	Tone       uint8
	ToneNumber uint8
}

// Offsets of the status fields after the frequency, and the record's length after it.
const (
	stStep     = 0
	stOffset   = 5
	stRIT      = 10
	stXIT      = 11
	stMemory   = 12
	stTX       = 15
	stMode     = 16
	stVFO      = 17
	stScan     = 18
	stSplit    = 19
	stTone     = 20
	stToneNum  = 21
	stReserved = 23
	stTail     = 24
)

// SplitASCII is a bufio.SplitFunc that returns one ';'-terminated frame per token, terminator
// included. Carriage returns, line feeds, blanks and NULs between frames are skipped. Noise is
// cut into windows of MaxASCIIFrame bytes from where a frame would start: a window without a
// ';' is discarded, so the rest of that noise up to the next ';' arrives as one frame that
// seldom parses. Every ';' therefore ends a token, and a frame that follows one comes out intact.
// An incomplete frame at end of input is dropped.
//
// It discards all the noise it holds and goes on to the frame after it in one call: a split
// function that returned no token for discarded noise would make bufio.Scanner read again
// before looking at the rest of its buffer, and frames already received would wait for later
// input. It never asks to keep more than MaxASCIIFrame-1 bytes.
func SplitASCII(data []byte, atEOF bool) (advance int, token []byte, err error) {
	start := 0
	for {
		for start < len(data) && isFiller(data[start]) {
			start++
		}
		rest := data[start:]
		if i := bytes.IndexByte(rest[:min(len(rest), MaxASCIIFrame)], ';'); i >= 0 {
			return start + i + 1, rest[:i+1], nil
		}
		if len(rest) < MaxASCIIFrame {
			break
		}
		// A whole window of noise: drop it and look at what follows in the same call.
		start += MaxASCIIFrame
	}
	if atEOF {
		return len(data), nil, nil
	}
	return start, nil, nil
}

func isFiller(c byte) bool { return c == '\r' || c == '\n' || c == ' ' || c == '\t' || c == 0 }

// ParseASCII decodes one frame, terminator included, as SplitASCII returns it. Unknown
// commands fail with ErrUnknown, everything else that does not fit the dialect with ErrMalformed
// (or ErrRange for a field that is well formed but too large for its Go type).
func ParseASCII(frame []byte, o ASCIIOpts) (ASCIIMsg, error) {
	o, err := o.resolve()
	if err != nil {
		return ASCIIMsg{}, fmt.Errorf("parse ascii frame: %w", err)
	}
	bad := func(why string, sentinel error) (ASCIIMsg, error) {
		return ASCIIMsg{}, fmt.Errorf("parse ascii frame %q: %s: %w", clip(frame), why, sentinel)
	}
	if len(frame) == 0 || frame[len(frame)-1] != ';' {
		return bad("no terminating ';'", ErrMalformed)
	}
	body := frame[:len(frame)-1]
	if bytes.IndexByte(body, ';') >= 0 {
		return bad("more than one frame", ErrMalformed)
	}
	if string(body) == string(CmdError) {
		return ASCIIMsg{Cmd: CmdError}, nil
	}
	if len(body) < 2 || !isUpper(body[0]) || !isUpper(body[1]) {
		return bad("command is not two upper-case letters", ErrMalformed)
	}
	m := ASCIIMsg{Cmd: ASCIICmd(body[:2])}
	p := body[2:]
	if len(p) == 0 {
		switch m.Cmd {
		case CmdFreqA, CmdFreqB, CmdMode, CmdVFO, CmdStatus, CmdAutoInfo, CmdPower, CmdID:
			m.Query = true
			return m, nil
		case CmdTransmit:
			m.TX = TXDefault
			return m, nil
		case CmdReceive:
			return m, nil
		}
		return bad("command", ErrUnknown)
	}
	switch m.Cmd {
	case CmdFreqA, CmdFreqB:
		f, err := parseFreq(p, o.FreqDigits)
		if err != nil {
			return bad("frequency", err)
		}
		m.Freq = f
	case CmdMode:
		v, ok := digits(p, 1)
		if !ok {
			return bad("mode is not one digit", ErrMalformed)
		}
		m.Mode = ASCIIMode(v)
	case CmdVFO:
		v, ok := digits(p, 1)
		if !ok || v > uint64(VFOB) {
			return bad("VFO is not 0 or 1", ErrMalformed)
		}
		m.VFO = VFO(v)
	case CmdTransmit:
		v, ok := digits(p, 1)
		if !ok || v > 2 {
			return bad("transmit source is not 0, 1 or 2", ErrMalformed)
		}
		m.TX = TXSource(v + 1)
	case CmdAutoInfo:
		v, ok := digits(p, 1)
		if !ok || v > 3 {
			return bad("auto-information level is not 0 to 3", ErrMalformed)
		}
		m.AutoInfo = uint8(v)
	case CmdPower:
		v, ok := digits(p, 3)
		if !ok {
			return bad("power is not 3 digits", ErrMalformed)
		}
		m.Power = physic.Power(v) * physic.Watt
	case CmdID:
		v, ok := digits(p, o.IDDigits)
		if !ok {
			return bad(fmt.Sprintf("ID is not %d digits", o.IDDigits), ErrMalformed)
		}
		m.ID = uint16(v)
	case CmdStatus:
		st, err := parseStatus(p, o.FreqDigits)
		if err != nil {
			return bad("status record", err)
		}
		m.Status = st
	case CmdReceive:
		return bad("RX takes no parameter", ErrMalformed)
	default:
		return bad("command", ErrUnknown)
	}
	return m, nil
}

// AppendASCII appends m's frame, terminator included, to dst. It fails with ErrUnknown for a
// command the codec does not know and with ErrRange for a field value that the frame cannot
// carry.
func AppendASCII(dst []byte, m ASCIIMsg, o ASCIIOpts) ([]byte, error) {
	o, err := o.resolve()
	if err != nil {
		return dst, fmt.Errorf("format ascii frame: %w", err)
	}
	bad := func(why string, sentinel error) ([]byte, error) {
		return dst, fmt.Errorf("format ascii frame %s: %s: %w", m.Cmd, why, sentinel)
	}
	out := append(dst, m.Cmd...)
	if m.Cmd == CmdError {
		return append(out, ';'), nil
	}
	if m.Query {
		switch m.Cmd {
		case CmdFreqA, CmdFreqB, CmdMode, CmdVFO, CmdStatus, CmdAutoInfo, CmdPower, CmdID:
			return append(out, ';'), nil
		case CmdTransmit, CmdReceive:
			return bad("has no query form", ErrMalformed)
		}
		return bad("command", ErrUnknown)
	}
	switch m.Cmd {
	case CmdFreqA, CmdFreqB:
		if out, err = appendFreq(out, m.Freq, o.FreqDigits); err != nil {
			return bad("frequency", err)
		}
	case CmdMode:
		if m.Mode > 9 {
			return bad(fmt.Sprintf("mode code %d", m.Mode), ErrRange)
		}
		out = append(out, '0'+byte(m.Mode))
	case CmdVFO:
		if m.VFO > VFOB {
			return bad(fmt.Sprintf("VFO %d", m.VFO), ErrRange)
		}
		out = append(out, '0'+byte(m.VFO))
	case CmdTransmit:
		switch {
		case m.TX == TXDefault:
		case m.TX <= TXTune:
			out = append(out, '0'+byte(m.TX-1))
		default:
			return bad(fmt.Sprintf("transmit source %d", m.TX), ErrRange)
		}
	case CmdReceive:
	case CmdAutoInfo:
		if m.AutoInfo > 3 {
			return bad(fmt.Sprintf("auto-information level %d", m.AutoInfo), ErrRange)
		}
		out = append(out, '0'+m.AutoInfo)
	case CmdPower:
		if m.Power < 0 || m.Power%physic.Watt != 0 || m.Power > 999*physic.Watt {
			return bad(fmt.Sprintf("power %s is not 0 to 999 whole watts", m.Power), ErrRange)
		}
		out = appendDigits(out, uint64(m.Power/physic.Watt), 3)
	case CmdID:
		if uint64(m.ID) >= pow10(o.IDDigits) {
			return bad(fmt.Sprintf("ID %d is wider than %d digits", m.ID, o.IDDigits), ErrRange)
		}
		out = appendDigits(out, uint64(m.ID), o.IDDigits)
	case CmdStatus:
		if out, err = appendStatus(out, m.Status, o.FreqDigits); err != nil {
			return bad("status record", err)
		}
	default:
		return bad("command", ErrUnknown)
	}
	return append(out, ';'), nil
}

func parseFreq(p []byte, width int) (physic.Frequency, error) {
	v, ok := digits(p, width)
	if !ok {
		return 0, fmt.Errorf("not %d digits: %w", width, ErrMalformed)
	}
	return hzToFreq(v)
}

// hzToFreq converts whole hertz, refusing what physic.Frequency cannot hold.
func hzToFreq(hz uint64) (physic.Frequency, error) {
	if hz > uint64(maxFreq/physic.Hertz) {
		return 0, fmt.Errorf("%d Hz: %w", hz, ErrRange)
	}
	return physic.Frequency(hz) * physic.Hertz, nil
}

const maxFreq = physic.Frequency(1<<63 - 1)

// freqToHz converts f to whole hertz below 10^width.
func freqToHz(f physic.Frequency, width int) (uint64, error) {
	if f < 0 || f%physic.Hertz != 0 {
		return 0, fmt.Errorf("%s is not a whole number of hertz: %w", f, ErrRange)
	}
	hz := uint64(f / physic.Hertz)
	if hz >= pow10(width) {
		return 0, fmt.Errorf("%s is wider than %d digits: %w", f, width, ErrRange)
	}
	return hz, nil
}

func appendFreq(out []byte, f physic.Frequency, width int) ([]byte, error) {
	hz, err := freqToHz(f, width)
	if err != nil {
		return out, err
	}
	return appendDigits(out, hz, width), nil
}

func parseStatus(p []byte, w int) (Status, error) {
	if len(p) != w+stTail {
		return Status{}, fmt.Errorf("%d bytes, want %d: %w", len(p), w+stTail, ErrMalformed)
	}
	var st Status
	var err error
	if st.Freq, err = parseFreq(p[:w], w); err != nil {
		return Status{}, err
	}
	t := p[w:]
	for _, c := range t[stStep:stOffset] {
		if c != ' ' && !isDigit(c) {
			return Status{}, fmt.Errorf("step field %q: %w", t[stStep:stOffset], ErrMalformed)
		}
	}
	sign := t[stOffset]
	off, ok := digits(t[stOffset+1:stRIT], 4)
	if !ok || (sign != '+' && sign != '-') {
		return Status{}, fmt.Errorf("offset field %q: %w", t[stOffset:stRIT], ErrMalformed)
	}
	st.Offset = int16(off)
	if sign == '-' {
		st.Offset = -st.Offset
	}
	flag := func(i int, name string, dst *bool) {
		switch t[i] {
		case '0':
		case '1':
			*dst = true
		default:
			err = errors.Join(err, fmt.Errorf("%s flag %q: %w", name, t[i], ErrMalformed))
		}
	}
	flag(stRIT, "RIT", &st.RIT)
	flag(stXIT, "XIT", &st.XIT)
	flag(stTX, "TX", &st.TX)
	flag(stScan, "scan", &st.Scan)
	flag(stSplit, "split", &st.Split)
	if err != nil {
		return Status{}, err
	}
	// field reads the fixed-width decimal field t[from:to], at most limit.
	field := func(name string, from, to int, limit uint64) (uint64, error) {
		v, ok := digits(t[from:to], to-from)
		if !ok || v > limit {
			return 0, fmt.Errorf("%s field %q: %w", name, t[from:to], ErrMalformed)
		}
		return v, nil
	}
	var v uint64
	if v, err = field("memory", stMemory, stTX, 999); err != nil {
		return Status{}, err
	}
	st.Memory = uint16(v)
	if v, err = field("mode", stMode, stVFO, 9); err != nil {
		return Status{}, err
	}
	st.Mode = ASCIIMode(v)
	if v, err = field("VFO", stVFO, stScan, uint64(VFOMemory)); err != nil {
		return Status{}, err
	}
	st.VFO = VFO(v)
	if v, err = field("tone", stTone, stToneNum, 9); err != nil {
		return Status{}, err
	}
	st.Tone = uint8(v)
	if v, err = field("tone number", stToneNum, stReserved, 99); err != nil {
		return Status{}, err
	}
	st.ToneNumber = uint8(v)
	if c := t[stReserved]; c != ' ' && !isDigit(c) {
		return Status{}, fmt.Errorf("reserved field %q: %w", c, ErrMalformed)
	}
	return st, nil
}

func appendStatus(out []byte, st Status, w int) ([]byte, error) {
	var errs []error
	hz, err := freqToHz(st.Freq, w)
	if err != nil {
		errs = append(errs, err)
	}
	if st.Offset < -9999 || st.Offset > 9999 {
		errs = append(errs, fmt.Errorf("offset %d Hz: %w", st.Offset, ErrRange))
	}
	if st.Memory > 999 {
		errs = append(errs, fmt.Errorf("memory channel %d: %w", st.Memory, ErrRange))
	}
	if st.Mode > 9 {
		errs = append(errs, fmt.Errorf("mode code %d: %w", st.Mode, ErrRange))
	}
	if st.VFO > VFOMemory {
		errs = append(errs, fmt.Errorf("VFO %d: %w", st.VFO, ErrRange))
	}
	if st.Tone > 9 {
		errs = append(errs, fmt.Errorf("tone %d: %w", st.Tone, ErrRange))
	}
	if st.ToneNumber > 99 {
		errs = append(errs, fmt.Errorf("tone number %d: %w", st.ToneNumber, ErrRange))
	}
	if err := errors.Join(errs...); err != nil {
		return out, err
	}
	out = appendDigits(out, hz, w)
	out = append(out, "     "...)
	off := int(st.Offset)
	if off < 0 {
		out = append(out, '-')
		off = -off
	} else {
		out = append(out, '+')
	}
	out = appendDigits(out, uint64(off), 4)
	out = append(out, bit(st.RIT), bit(st.XIT))
	out = appendDigits(out, uint64(st.Memory), 3)
	out = append(out, bit(st.TX), '0'+byte(st.Mode), '0'+byte(st.VFO), bit(st.Scan), bit(st.Split), '0'+st.Tone)
	out = appendDigits(out, uint64(st.ToneNumber), 2)
	return append(out, ' '), nil
}

func bit(b bool) byte {
	if b {
		return '1'
	}
	return '0'
}

// digits reads exactly n decimal digits.
func digits(p []byte, n int) (uint64, bool) {
	if len(p) != n {
		return 0, false
	}
	var v uint64
	for _, c := range p {
		if !isDigit(c) {
			return 0, false
		}
		v = v*10 + uint64(c-'0')
	}
	return v, true
}

// appendDigits writes v zero-padded to n digits; v must be below 10^n.
func appendDigits(out []byte, v uint64, n int) []byte {
	start := len(out)
	for range n {
		out = append(out, '0')
	}
	for i := len(out) - 1; i >= start; i-- {
		out[i] = '0' + byte(v%10)
		v /= 10
	}
	return out
}

func pow10(n int) uint64 {
	p := uint64(1)
	for range n {
		p *= 10
	}
	return p
}

func isDigit(c byte) bool { return c >= '0' && c <= '9' }
func isUpper(c byte) bool { return c >= 'A' && c <= 'Z' }

// clip keeps error messages short when a caller parses a long run of noise.
func clip(b []byte) []byte {
	if len(b) > MaxASCIIFrame {
		return b[:MaxASCIIFrame]
	}
	return b
}

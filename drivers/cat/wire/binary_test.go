package wire

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"

	"periph.io/x/conn/v3/physic"
)

// hx turns "fe fe 94 e0 03 fd" into bytes; tests write frames out the way the published
// references print them.
func hx(s string) []byte {
	var b []byte
	for _, f := range strings.Fields(s) {
		var v byte
		if _, err := fmt.Sscanf(f, "%02x", &v); err != nil {
			panic("bad hex in test table: " + f)
		}
		b = append(b, v)
	}
	return b
}

const radioAddr = 0x94 // an example radio address; any address but the reserved ones works

// Worked examples of the binary dialect, written out by hand from memory of the radios'
// published references: frequency as five packed-BCD bytes, least significant first (14.074 000
// MHz is 00 40 07 14 00), mode bytes 00 LSB, 01 USB, 02 AM, 03 CW, 04 RTTY, 05 FM, 07 CW
// reversed, power level as the BCD digits 0000–0255 most significant first, OK FB and NG FA.
var binaryCases = []struct {
	name  string
	frame string
	msg   BinaryMsg
}{
	{"read frequency", "fe fe 94 e0 03 fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinReadFreq, Query: true}},
	{"frequency answer 14.074 MHz", "fe fe e0 94 03 00 40 07 14 00 fd",
		BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinReadFreq, Freq: 14074 * physic.KiloHertz}},
	{"set frequency 14.074 MHz", "fe fe 94 e0 05 00 40 07 14 00 fd",
		BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinSetFreq, Freq: 14074 * physic.KiloHertz}},
	// The references' own BCD example: 1 234 567 890 Hz is 90 78 56 34 12.
	{"set frequency 1234.567890 MHz", "fe fe 94 e0 05 90 78 56 34 12 fd",
		BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinSetFreq, Freq: 1234567890 * physic.Hertz}},
	{"set frequency 7.0351 MHz", "fe fe 94 e0 05 00 51 03 07 00 fd",
		BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinSetFreq, Freq: 7035100 * physic.Hertz}},
	{"transceive frequency 21.074 MHz", "fe fe 00 94 00 00 40 07 21 00 fd",
		BinaryMsg{To: AddrBroadcast, From: radioAddr, Cmd: BinTransceiveFreq, Freq: 21074 * physic.KiloHertz}},
	{"read mode", "fe fe 94 e0 04 fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinReadMode, Query: true}},
	{"mode answer USB filter 1", "fe fe e0 94 04 01 01 fd",
		BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinReadMode, Mode: BinUSB, Filter: 1}},
	{"set mode CW", "fe fe 94 e0 06 03 fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinSetMode, Mode: BinCW}},
	{"set mode LSB filter 2", "fe fe 94 e0 06 00 02 fd",
		BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinSetMode, Mode: BinLSB, Filter: 2}},
	{"transceive mode FM", "fe fe 00 94 01 05 01 fd",
		BinaryMsg{To: AddrBroadcast, From: radioAddr, Cmd: BinTransceiveMode, Mode: BinFM, Filter: 1}},
	{"select VFO B", "fe fe 94 e0 07 01 fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinSelectVFO, VFO: VFOB}},
	{"read power", "fe fe 94 e0 14 0a fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinPower, Query: true}},
	{"set power level 128", "fe fe 94 e0 14 0a 01 28 fd",
		BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinPower, Level: 128}},
	{"power answer level 255", "fe fe e0 94 14 0a 02 55 fd",
		BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinPower, Level: MaxLevel}},
	{"power answer level 0", "fe fe e0 94 14 0a 00 00 fd", BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinPower}},
	{"read transmit state", "fe fe 94 e0 1c 00 fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinPTT, Query: true}},
	{"transmit on", "fe fe 94 e0 1c 00 01 fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinPTT, TX: true}},
	{"transmit state answer off", "fe fe e0 94 1c 00 00 fd", BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinPTT}},
	{"read ID", "fe fe 94 e0 19 00 fd", BinaryMsg{To: radioAddr, From: AddrController, Cmd: BinID, Query: true}},
	{"ID answer", "fe fe e0 94 19 00 94 fd", BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinID, Addr: radioAddr}},
	{"OK", "fe fe e0 94 fb fd", BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinOK}},
	{"NG", "fe fe e0 94 fa fd", BinaryMsg{To: AddrController, From: radioAddr, Cmd: BinNG}},
}

func TestParseBinary(t *testing.T) {
	for _, tc := range binaryCases {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParseBinary(hx(tc.frame))
			if err != nil {
				t.Fatalf("ParseBinary(%s): %v", tc.frame, err)
			}
			if got != tc.msg {
				t.Fatalf("ParseBinary(%s) =\n %+v\nwant\n %+v", tc.frame, got, tc.msg)
			}
		})
	}
}

func TestAppendBinary(t *testing.T) {
	for _, tc := range binaryCases {
		t.Run(tc.name, func(t *testing.T) {
			got, err := AppendBinary([]byte{0x55}, tc.msg)
			if err != nil {
				t.Fatalf("AppendBinary(%+v): %v", tc.msg, err)
			}
			if want := append([]byte{0x55}, hx(tc.frame)...); !bytes.Equal(got, want) {
				t.Fatalf("AppendBinary = % x, want % x", got, want)
			}
		})
	}
}

func TestParseBinaryErrors(t *testing.T) {
	cases := []struct {
		name  string
		frame string
		want  error
	}{
		{"too short", "fe fe 94 e0 fd", ErrMalformed},
		{"one preamble byte", "fe 94 e0 03 00 fd", ErrMalformed},
		{"no end byte", "fe fe 94 e0 03 00", ErrMalformed},
		{"preamble inside", "fe fe 94 fe e0 03 fd", ErrMalformed},
		{"jam inside", "fe fe 94 e0 fc 03 fd", ErrMalformed},
		{"frequency 4 bytes", "fe fe 94 e0 05 00 40 07 14 fd", ErrMalformed},
		{"frequency 6 bytes", "fe fe 94 e0 05 00 40 07 14 00 00 fd", ErrMalformed},
		{"frequency nibble a", "fe fe 94 e0 05 0a 40 07 14 00 fd", ErrNotBCD},
		{"frequency nibble f", "fe fe e0 94 03 00 40 07 f4 00 fd", ErrNotBCD},
		{"set frequency without data", "fe fe 94 e0 05 fd", ErrMalformed},
		{"power level 256", "fe fe 94 e0 14 0a 02 56 fd", ErrRange},
		{"power level not BCD", "fe fe 94 e0 14 0a 0a 00 fd", ErrNotBCD},
		{"power level 1 byte", "fe fe 94 e0 14 0a 01 fd", ErrMalformed},
		{"unknown command", "fe fe 94 e0 99 fd", ErrUnknown},
		{"unknown sub-command", "fe fe 94 e0 14 01 fd", ErrUnknown},
		{"missing sub-command", "fe fe 94 e0 14 fd", ErrMalformed},
		{"transmit state 2", "fe fe 94 e0 1c 00 02 fd", ErrMalformed},
		{"select VFO without data", "fe fe 94 e0 07 fd", ErrMalformed},
		{"select VFO 2", "fe fe 94 e0 07 02 fd", ErrMalformed},
		{"mode 3 bytes", "fe fe 94 e0 06 01 01 01 fd", ErrMalformed},
		{"set mode without data", "fe fe 94 e0 06 fd", ErrMalformed},
		{"filter 0", "fe fe 94 e0 06 03 00 fd", ErrMalformed},
		{"OK with data", "fe fe e0 94 fb 00 fd", ErrMalformed},
		{"ID answer 2 bytes", "fe fe e0 94 19 00 94 94 fd", ErrMalformed},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m, err := ParseBinary(hx(tc.frame))
			if !errors.Is(err, tc.want) {
				t.Fatalf("ParseBinary(%s) = %+v, %v; want %v", tc.frame, m, err, tc.want)
			}
		})
	}
}

func TestAppendBinaryErrors(t *testing.T) {
	to := func(m BinaryMsg) BinaryMsg { m.To, m.From = radioAddr, AddrController; return m }
	cases := []struct {
		name string
		msg  BinaryMsg
		want error
	}{
		// 10 GHz needs 11 digits; the field has 10.
		{"frequency 10 GHz", to(BinaryMsg{Cmd: BinSetFreq, Freq: 10 * physic.GigaHertz}), ErrRange},
		{"fraction of a hertz", to(BinaryMsg{Cmd: BinSetFreq, Freq: 7 * physic.MegaHertz / 3}), ErrRange},
		{"address is a framing byte", BinaryMsg{To: 0xfe, From: AddrController, Cmd: BinReadFreq, Query: true}, ErrRange},
		{"mode is a framing byte", to(BinaryMsg{Cmd: BinSetMode, Mode: 0xfd}), ErrRange},
		{"VFO memory", to(BinaryMsg{Cmd: BinSelectVFO, VFO: VFOMemory}), ErrRange},
		{"unknown command", to(BinaryMsg{Cmd: 0x9900}), ErrUnknown},
		{"sub-command on a plain command", to(BinaryMsg{Cmd: 0x0301}), ErrUnknown},
		{"query of a set command", to(BinaryMsg{Cmd: BinSetFreq, Query: true}), ErrMalformed},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			b, err := AppendBinary([]byte{1}, tc.msg)
			if !errors.Is(err, tc.want) {
				t.Fatalf("AppendBinary(%+v) = % x, %v; want %v", tc.msg, b, err, tc.want)
			}
			if !bytes.Equal(b, []byte{1}) {
				t.Fatalf("AppendBinary changed dst to % x on error", b)
			}
		})
	}
}

func TestAppendBinaryFrameLimits(t *testing.T) {
	if _, err := AppendBinaryFrame(nil, BinaryFrame{To: radioAddr, From: AddrController, Cmd: 0x1a, Data: make([]byte, MaxBinaryFrame)}); !errors.Is(err, ErrRange) {
		t.Fatalf("overlong frame: %v, want ErrRange", err)
	}
	if _, err := AppendBinaryFrame(nil, BinaryFrame{To: radioAddr, From: AddrController, Cmd: 0x1a, Data: []byte{0xfc}}); !errors.Is(err, ErrRange) {
		t.Fatalf("jam byte in data: %v, want ErrRange", err)
	}
}

func TestSplitBinary(t *testing.T) {
	good := "fe fe 94 e0 03 fd"
	cases := []struct {
		name string
		in   string
		want []string
	}{
		{"one frame", good, []string{good}},
		{"two frames back to back", good + " fe fe e0 94 fb fd", []string{good, "fe fe e0 94 fb fd"}},
		{"garbage before", "00 13 94 fd " + good, []string{good}},
		{"extra preamble bytes", "fe fe fe fe 94 e0 03 fd", []string{good}},
		{"lone preamble byte", "fe 94 " + good, []string{good}},
		{"frame broken by a new one", "fe fe 94 e0 05 00 40 " + good, []string{good}},
		{"collision jam", "fe fe 94 e0 05 fc fc fc fd " + good, []string{good}},
		{"too short", "fe fe 94 fd fe fe 94 e0 fd " + good, []string{good}},
		{"overlong", "fe fe " + strings.Repeat("01 ", MaxBinaryFrame) + "fd " + good, []string{good}},
		{"incomplete at end dropped", good + " fe fe 94 e0 05 00", []string{good}},
		{"preamble at end dropped", good + " fe", []string{good}},
		{"nothing", "", nil},
	}
	for _, tc := range cases {
		var want []string
		for _, w := range tc.want {
			want = append(want, string(hx(w)))
		}
		for _, oneByte := range []bool{false, true} {
			got := splitAll(t, hx(tc.in), SplitBinary, oneByte)
			if fmt.Sprintf("% x", got) != fmt.Sprintf("% x", want) {
				t.Errorf("%s (one byte at a time %v): tokens % x, want % x", tc.name, oneByte, got, want)
			}
		}
	}
}

func TestBCD(t *testing.T) {
	// From memory of the binary dialect's references: frequencies low pair first, levels high
	// pair first; the digits themselves are ordinary packed BCD.
	cases := []struct {
		v     uint64
		order BCDOrder
		bytes string
	}{
		{14074000, LowFirst, "00 40 07 14 00"},
		{1234567890, LowFirst, "90 78 56 34 12"},
		{255, HighFirst, "02 55"},
		{128, HighFirst, "01 28"},
		{0, LowFirst, "00 00 00 00 00"},
		{9999999999, LowFirst, "99 99 99 99 99"},
	}
	for _, tc := range cases {
		want := hx(tc.bytes)
		got := make([]byte, len(want))
		if err := EncodeBCD(got, tc.v, tc.order); err != nil || !bytes.Equal(got, want) {
			t.Errorf("EncodeBCD(%d, %d) = % x, %v; want % x", tc.v, tc.order, got, err, want)
		}
		v, err := DecodeBCD(want, tc.order)
		if err != nil || v != tc.v {
			t.Errorf("DecodeBCD(% x, %d) = %d, %v; want %d", want, tc.order, v, err, tc.v)
		}
	}
	if err := EncodeBCD(make([]byte, 1), 100, LowFirst); !errors.Is(err, ErrRange) {
		t.Errorf("100 in one byte: %v, want ErrRange", err)
	}
	if err := EncodeBCD(make([]byte, 10), 1, LowFirst); !errors.Is(err, ErrRange) {
		t.Errorf("10-byte field: %v, want ErrRange", err)
	}
	for _, b := range []byte{0x0a, 0xa0, 0x9f, 0xff} {
		if _, err := DecodeBCD([]byte{0x00, b}, HighFirst); !errors.Is(err, ErrNotBCD) {
			t.Errorf("DecodeBCD(00 %02x): %v, want ErrNotBCD", b, err)
		}
	}
}

func FuzzBinaryFrames(f *testing.F) {
	for _, tc := range binaryCases {
		f.Add(hx(tc.frame))
	}
	f.Add(hx("00 fe fe fe 94 e0 05 00 40 fe fe 94 e0 03 fd fc fc fc fe fe e0 94 fb fd fe"))
	f.Add(hx("fe fe 94 e0 05 0a 40 07 14 00 fd fe fe 94 e0 14 0a 02 56 fd"))
	f.Fuzz(func(t *testing.T, data []byte) {
		sc := bufio.NewScanner(bytes.NewReader(data))
		sc.Split(SplitBinary)
		total := 0
		for sc.Scan() {
			tok := sc.Bytes()
			total += len(tok)
			if len(tok) < minBinaryFrame || len(tok) > MaxBinaryFrame {
				t.Fatalf("token % x has length %d", tok, len(tok))
			}
			fr, err := ParseBinaryFrame(tok)
			if err != nil {
				t.Fatalf("SplitBinary returned % x, which does not parse: %v", tok, err)
			}
			m, err := DecodeBinary(fr)
			if err != nil {
				if !errors.Is(err, ErrMalformed) && !errors.Is(err, ErrUnknown) && !errors.Is(err, ErrRange) && !errors.Is(err, ErrNotBCD) {
					t.Fatalf("DecodeBinary(% x) error %v wraps no sentinel", tok, err)
				}
				continue
			}
			// Decoding loses nothing: a decoded frame re-encodes to the same bytes.
			out, err := AppendBinary(nil, m)
			if err != nil {
				t.Fatalf("AppendBinary(DecodeBinary(% x) = %+v): %v", tok, m, err)
			}
			if !bytes.Equal(out, tok) {
				t.Fatalf("round trip % x -> %+v -> % x", tok, m, out)
			}
		}
		if sc.Err() != nil {
			t.Fatalf("scan: %v", sc.Err())
		}
		if total > len(data) {
			t.Fatalf("tokens hold %d bytes of %d input", total, len(data))
		}
		_, _ = ParseBinary(data) // must not panic on arbitrary input
	})
}

func FuzzBCDRoundTrip(f *testing.F) {
	f.Add(uint64(14074000), uint8(5), false, []byte{0x00, 0x40, 0x07, 0x14, 0x00})
	f.Add(uint64(255), uint8(2), true, []byte{0x02, 0x55})
	f.Add(uint64(math.MaxUint64), uint8(9), false, []byte{0x1a})
	f.Add(uint64(100), uint8(1), true, []byte{})
	f.Fuzz(func(t *testing.T, v uint64, n uint8, high bool, raw []byte) {
		order := LowFirst
		if high {
			order = HighFirst
		}
		n %= maxBCDBytes + 1
		dst := make([]byte, n)
		err := EncodeBCD(dst, v, order)
		fits := v < pow10(2*int(n)) // n ≤ 9, so 10^(2n) ≤ 10^18 is itself a uint64
		switch {
		case err == nil && !fits, err != nil && fits:
			t.Fatalf("EncodeBCD(%d into %d bytes) = %v; fits %v", v, n, err, fits)
		case err != nil && !errors.Is(err, ErrRange):
			t.Fatalf("EncodeBCD error %v is not ErrRange", err)
		case err == nil:
			got, err := DecodeBCD(dst, order)
			if err != nil || got != v {
				t.Fatalf("DecodeBCD(EncodeBCD(%d)) = %d, %v", v, got, err)
			}
		}
		if len(raw) > maxBCDBytes {
			raw = raw[:maxBCDBytes]
		}
		x, err := DecodeBCD(raw, order)
		if err != nil {
			if !errors.Is(err, ErrNotBCD) {
				t.Fatalf("DecodeBCD(% x) error %v is not ErrNotBCD", raw, err)
			}
			return
		}
		back := make([]byte, len(raw))
		if err := EncodeBCD(back, x, order); err != nil || !bytes.Equal(back, raw) {
			t.Fatalf("EncodeBCD(DecodeBCD(% x) = %d) = % x, %v", raw, x, back, err)
		}
	})
}

func BenchmarkSplitAndParseBinary(b *testing.B) {
	stream := bytes.Repeat(hx("fe fe e0 94 03 00 40 07 14 00 fd 00 fe fe 94 e0 14 0a 01 28 fd"), 64)
	for b.Loop() {
		sc := bufio.NewScanner(bytes.NewReader(stream))
		sc.Split(SplitBinary)
		for sc.Scan() {
			if _, err := ParseBinary(sc.Bytes()); err != nil {
				b.Fatal(err)
			}
		}
	}
}

package wire

import (
	"bufio"
	"bytes"
	"errors"
	"strings"
	"testing"
	"testing/iotest"

	"periph.io/x/conn/v3/physic"
)

var nine = ASCIIOpts{FreqDigits: 9}

// Worked examples of the ASCII dialect. The frames are written out by hand from memory of the
// radios' published command references: frequency in hertz zero-padded to the field width (11
// digits, or 9 on the narrower radios), mode codes 1 LSB, 2 USB, 3 CW, 4 FM, 5 AM, 6 FSK, 7 CW
// reversed, 9 FSK reversed, power as three digits of watts, set commands and answers sharing one
// form.
var asciiCases = []struct {
	name  string
	opts  ASCIIOpts
	frame string
	msg   ASCIIMsg
}{
	{"VFO A query", ASCIIOpts{}, "FA;", ASCIIMsg{Cmd: CmdFreqA, Query: true}},
	{"VFO A 14.074 MHz, 11 digits", ASCIIOpts{}, "FA00014074000;", ASCIIMsg{Cmd: CmdFreqA, Freq: 14074 * physic.KiloHertz}},
	{"VFO B 7.074 MHz, 11 digits", ASCIIOpts{}, "FB00007074000;", ASCIIMsg{Cmd: CmdFreqB, Freq: 7074 * physic.KiloHertz}},
	{"VFO A 1.8405 MHz, 11 digits", ASCIIOpts{}, "FA00001840500;", ASCIIMsg{Cmd: CmdFreqA, Freq: 1840500 * physic.Hertz}},
	{"VFO A 28.074 MHz, 9 digits", nine, "FA028074000;", ASCIIMsg{Cmd: CmdFreqA, Freq: 28074 * physic.KiloHertz}},
	{"VFO B 3.573 MHz, 9 digits", nine, "FB003573000;", ASCIIMsg{Cmd: CmdFreqB, Freq: 3573 * physic.KiloHertz}},
	{"VFO A 10.136 MHz with 1 Hz resolution", ASCIIOpts{}, "FA00010136001;", ASCIIMsg{Cmd: CmdFreqA, Freq: 10136001 * physic.Hertz}},
	{"mode query", ASCIIOpts{}, "MD;", ASCIIMsg{Cmd: CmdMode, Query: true}},
	{"mode USB", ASCIIOpts{}, "MD2;", ASCIIMsg{Cmd: CmdMode, Mode: ASCIIUSB}},
	{"mode LSB", ASCIIOpts{}, "MD1;", ASCIIMsg{Cmd: CmdMode, Mode: ASCIILSB}},
	{"mode CW", ASCIIOpts{}, "MD3;", ASCIIMsg{Cmd: CmdMode, Mode: ASCIICW}},
	{"mode FSK reversed", ASCIIOpts{}, "MD9;", ASCIIMsg{Cmd: CmdMode, Mode: ASCIIFSKR}},
	{"VFO select query", ASCIIOpts{}, "FR;", ASCIIMsg{Cmd: CmdVFO, Query: true}},
	{"VFO select B", ASCIIOpts{}, "FR1;", ASCIIMsg{Cmd: CmdVFO, VFO: VFOB}},
	{"transmit", ASCIIOpts{}, "TX;", ASCIIMsg{Cmd: CmdTransmit, TX: TXDefault}},
	{"transmit from microphone", ASCIIOpts{}, "TX0;", ASCIIMsg{Cmd: CmdTransmit, TX: TXVoice}},
	{"transmit from data input", ASCIIOpts{}, "TX1;", ASCIIMsg{Cmd: CmdTransmit, TX: TXData}},
	{"transmit tune carrier", ASCIIOpts{}, "TX2;", ASCIIMsg{Cmd: CmdTransmit, TX: TXTune}},
	{"receive", ASCIIOpts{}, "RX;", ASCIIMsg{Cmd: CmdReceive}},
	{"status query", ASCIIOpts{}, "IF;", ASCIIMsg{Cmd: CmdStatus, Query: true}},
	{"auto-information query", ASCIIOpts{}, "AI;", ASCIIMsg{Cmd: CmdAutoInfo, Query: true}},
	{"auto-information off", ASCIIOpts{}, "AI0;", ASCIIMsg{Cmd: CmdAutoInfo, AutoInfo: 0}},
	{"auto-information on", ASCIIOpts{}, "AI2;", ASCIIMsg{Cmd: CmdAutoInfo, AutoInfo: 2}},
	{"power query", ASCIIOpts{}, "PC;", ASCIIMsg{Cmd: CmdPower, Query: true}},
	{"power 100 W", ASCIIOpts{}, "PC100;", ASCIIMsg{Cmd: CmdPower, Power: 100 * physic.Watt}},
	{"power 5 W", ASCIIOpts{}, "PC005;", ASCIIMsg{Cmd: CmdPower, Power: 5 * physic.Watt}},
	{"ID query", ASCIIOpts{}, "ID;", ASCIIMsg{Cmd: CmdID, Query: true}},
	{"ID answer, 3 digits", ASCIIOpts{}, "ID042;", ASCIIMsg{Cmd: CmdID, ID: 42}},
	{"ID answer, 4 digits", ASCIIOpts{IDDigits: 4}, "ID0650;", ASCIIMsg{Cmd: CmdID, ID: 650}},
	{"error answer", ASCIIOpts{}, "?;", ASCIIMsg{Cmd: CmdError}},
	{"status, 11 digits", ASCIIOpts{}, statusFrame11, ASCIIMsg{Cmd: CmdStatus, Status: status11}},
	{"status, 9 digits", nine, statusFrame9, ASCIIMsg{Cmd: CmdStatus, Status: status9}},
}

// statusFrame11 is the status record written out field by field, in the layout documented at
// Status (recalled from the 11-digit radios' published references).
var statusFrame11 = "IF" +
	"00014074000" + // frequency, Hz
	"     " + // step: blank
	"-0120" + // RIT/XIT offset −120 Hz
	"1" + // RIT on
	"0" + // XIT off
	"007" + // memory channel 7
	"1" + // transmitting
	"2" + // USB
	"1" + // VFO B
	"0" + // scan off
	"1" + // split on
	"2" + // tone function 2
	"08" + // tone number 8
	" " + // reserved
	";"

var status11 = Status{
	Freq: 14074 * physic.KiloHertz, Offset: -120, RIT: true, Memory: 7, TX: true,
	Mode: ASCIIUSB, VFO: VFOB, Split: true, Tone: 2, ToneNumber: 8,
}

var statusFrame9 = "IF" + "007074000" + "     " + "+0000" + "00" + "000" + "0" + "3" + "0" + "00" + "0" + "00" + " " + ";"

var status9 = Status{Freq: 7074 * physic.KiloHertz, Mode: ASCIICW}

func TestStatusRecordLength(t *testing.T) {
	// A 38-byte status frame with 11 frequency digits, from memory of the published
	// references; the rest of the record does not depend on the width.
	if n := len(statusFrame11); n != 38 {
		t.Fatalf("status frame has %d bytes, want 38", n)
	}
	b, err := AppendASCII(nil, ASCIIMsg{Cmd: CmdStatus, Status: status11}, ASCIIOpts{})
	if err != nil {
		t.Fatal(err)
	}
	if len(b) != 38 {
		t.Fatalf("formatted status has %d bytes, want 38", len(b))
	}
	b, err = AppendASCII(nil, ASCIIMsg{Cmd: CmdStatus, Status: status9}, nine)
	if err != nil {
		t.Fatal(err)
	}
	if len(b) != 38-2 { // two digits fewer in the frequency field
		t.Fatalf("9-digit status has %d bytes, want 36", len(b))
	}
}

func TestParseASCII(t *testing.T) {
	for _, tc := range asciiCases {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParseASCII([]byte(tc.frame), tc.opts)
			if err != nil {
				t.Fatalf("ParseASCII(%q): %v", tc.frame, err)
			}
			if got != tc.msg {
				t.Fatalf("ParseASCII(%q) =\n %+v\nwant\n %+v", tc.frame, got, tc.msg)
			}
		})
	}
}

func TestAppendASCII(t *testing.T) {
	for _, tc := range asciiCases {
		t.Run(tc.name, func(t *testing.T) {
			got, err := AppendASCII([]byte("prefix"), tc.msg, tc.opts)
			if err != nil {
				t.Fatalf("AppendASCII(%+v): %v", tc.msg, err)
			}
			if want := "prefix" + tc.frame; string(got) != want {
				t.Fatalf("AppendASCII = %q, want %q", got, want)
			}
		})
	}
}

func TestStatusIgnoredFieldsAccepted(t *testing.T) {
	// Radios fill the step and reserved fields differently; both digits and blanks are read.
	frame := strings.Replace(statusFrame11, "     ", "00000", 1)
	frame = strings.Replace(frame, " ;", "0;", 1)
	got, err := ParseASCII([]byte(frame), ASCIIOpts{})
	if err != nil {
		t.Fatal(err)
	}
	if got.Status != status11 {
		t.Fatalf("status = %+v, want %+v", got.Status, status11)
	}
}

func TestParseASCIIErrors(t *testing.T) {
	cases := []struct {
		name  string
		opts  ASCIIOpts
		frame string
		want  error
	}{
		{"empty", ASCIIOpts{}, "", ErrMalformed},
		{"no terminator", ASCIIOpts{}, "FA00014074000", ErrMalformed},
		{"two frames", ASCIIOpts{}, "FA;MD;", ErrMalformed},
		{"one letter", ASCIIOpts{}, "F;", ErrMalformed},
		{"lower case", ASCIIOpts{}, "fa;", ErrMalformed},
		{"digit in command", ASCIIOpts{}, "F1;", ErrMalformed},
		{"unknown query", ASCIIOpts{}, "ZZ;", ErrUnknown},
		{"unknown set", ASCIIOpts{}, "ZZ123;", ErrUnknown},
		{"frequency 10 digits at width 11", ASCIIOpts{}, "FA0001407400;", ErrMalformed},
		{"frequency 11 digits at width 9", nine, "FA00014074000;", ErrMalformed},
		{"frequency with a letter", ASCIIOpts{}, "FA0001407400O;", ErrMalformed},
		{"frequency with a sign", ASCIIOpts{}, "FA-0014074000;", ErrMalformed},
		{"mode two digits", ASCIIOpts{}, "MD12;", ErrMalformed},
		{"mode letter", ASCIIOpts{}, "MDA;", ErrMalformed},
		{"VFO memory in select", ASCIIOpts{}, "FR2;", ErrMalformed},
		{"transmit source 3", ASCIIOpts{}, "TX3;", ErrMalformed},
		{"receive with parameter", ASCIIOpts{}, "RX0;", ErrMalformed},
		{"auto-information 4", ASCIIOpts{}, "AI4;", ErrMalformed},
		{"power two digits", ASCIIOpts{}, "PC50;", ErrMalformed},
		{"power four digits", ASCIIOpts{}, "PC0050;", ErrMalformed},
		{"ID two digits", ASCIIOpts{}, "ID42;", ErrMalformed},
		{"ID three digits at width 4", ASCIIOpts{IDDigits: 4}, "ID042;", ErrMalformed},
		{"status one byte short", ASCIIOpts{}, strings.Replace(statusFrame11, " ;", ";", 1), ErrMalformed},
		{"status bad sign", ASCIIOpts{}, strings.Replace(statusFrame11, "-0120", "*0120", 1), ErrMalformed},
		{"status bad flag", ASCIIOpts{}, strings.Replace(statusFrame11, "-01201", "-01207", 1), ErrMalformed},
		{"status 9-digit record at width 11", ASCIIOpts{}, statusFrame9, ErrMalformed},
		{"frequency width 5", ASCIIOpts{FreqDigits: 5}, "FA;", ErrRange},
		{"ID width 2", ASCIIOpts{IDDigits: 2}, "ID;", ErrRange},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m, err := ParseASCII([]byte(tc.frame), tc.opts)
			if !errors.Is(err, tc.want) {
				t.Fatalf("ParseASCII(%q) = %+v, %v; want %v", tc.frame, m, err, tc.want)
			}
		})
	}
}

func TestAppendASCIIErrors(t *testing.T) {
	cases := []struct {
		name string
		opts ASCIIOpts
		msg  ASCIIMsg
		want error
	}{
		// 100 GHz needs 12 digits.
		{"frequency too wide for 11 digits", ASCIIOpts{}, ASCIIMsg{Cmd: CmdFreqA, Freq: 100 * physic.GigaHertz}, ErrRange},
		// 1 GHz needs 10 digits.
		{"frequency too wide for 9 digits", nine, ASCIIMsg{Cmd: CmdFreqB, Freq: physic.GigaHertz}, ErrRange},
		{"fraction of a hertz", ASCIIOpts{}, ASCIIMsg{Cmd: CmdFreqA, Freq: 14074*physic.KiloHertz + physic.Hertz/2}, ErrRange},
		{"negative frequency", ASCIIOpts{}, ASCIIMsg{Cmd: CmdFreqA, Freq: -physic.Hertz}, ErrRange},
		{"mode code 10", ASCIIOpts{}, ASCIIMsg{Cmd: CmdMode, Mode: 10}, ErrRange},
		{"VFO memory in select", ASCIIOpts{}, ASCIIMsg{Cmd: CmdVFO, VFO: VFOMemory}, ErrRange},
		{"transmit source 4", ASCIIOpts{}, ASCIIMsg{Cmd: CmdTransmit, TX: TXTune + 1}, ErrRange},
		{"auto-information 4", ASCIIOpts{}, ASCIIMsg{Cmd: CmdAutoInfo, AutoInfo: 4}, ErrRange},
		{"power 1000 W", ASCIIOpts{}, ASCIIMsg{Cmd: CmdPower, Power: 1000 * physic.Watt}, ErrRange},
		{"power 50.5 W", ASCIIOpts{}, ASCIIMsg{Cmd: CmdPower, Power: 50*physic.Watt + 500*physic.MilliWatt}, ErrRange},
		{"ID 1000 in 3 digits", ASCIIOpts{}, ASCIIMsg{Cmd: CmdID, ID: 1000}, ErrRange},
		{"status offset 10000", ASCIIOpts{}, ASCIIMsg{Cmd: CmdStatus, Status: Status{Offset: 10000}}, ErrRange},
		{"status memory 1000", ASCIIOpts{}, ASCIIMsg{Cmd: CmdStatus, Status: Status{Memory: 1000}}, ErrRange},
		{"transmit query", ASCIIOpts{}, ASCIIMsg{Cmd: CmdTransmit, Query: true}, ErrMalformed},
		{"unknown command", ASCIIOpts{}, ASCIIMsg{Cmd: "ZZ"}, ErrUnknown},
		{"unknown query", ASCIIOpts{}, ASCIIMsg{Cmd: "ZZ", Query: true}, ErrUnknown},
		{"bad options", ASCIIOpts{FreqDigits: 12}, ASCIIMsg{Cmd: CmdFreqA, Query: true}, ErrRange},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			b, err := AppendASCII([]byte("x"), tc.msg, tc.opts)
			if !errors.Is(err, tc.want) {
				t.Fatalf("AppendASCII(%+v) = %q, %v; want %v", tc.msg, b, err, tc.want)
			}
			if string(b) != "x" {
				t.Fatalf("AppendASCII changed dst to %q on error", b)
			}
		})
	}
}

func TestOptsValidateReportsAll(t *testing.T) {
	err := ASCIIOpts{FreqDigits: 3, IDDigits: 9}.Validate()
	if !errors.Is(err, ErrRange) {
		t.Fatalf("Validate = %v, want ErrRange", err)
	}
	for _, key := range []string{"FreqDigits", "IDDigits"} {
		if !strings.Contains(err.Error(), key) {
			t.Errorf("Validate error %q does not name %s", err, key)
		}
	}
	if err := (ASCIIOpts{}).Validate(); err != nil {
		t.Fatalf("defaults do not validate: %v", err)
	}
}

func splitAll(t *testing.T, in []byte, split bufio.SplitFunc, oneByte bool) []string {
	t.Helper()
	var r = bytes.NewReader(in)
	sc := bufio.NewScanner(r)
	if oneByte {
		sc = bufio.NewScanner(iotest.OneByteReader(r))
	}
	sc.Split(split)
	var out []string
	for sc.Scan() {
		out = append(out, sc.Text())
	}
	if err := sc.Err(); err != nil {
		t.Fatalf("scan: %v", err)
	}
	return out
}

func TestSplitASCII(t *testing.T) {
	noise := strings.Repeat("x", MaxASCIIFrame+36)
	cases := []struct {
		name string
		in   string
		want []string
	}{
		{"two frames", "FA;MD2;", []string{"FA;", "MD2;"}},
		{"line endings between frames", "\r\nFA00014074000;\r\n ID;\n", []string{"FA00014074000;", "ID;"}},
		{"incomplete frame at end dropped", "FA;MD", []string{"FA;"}},
		{"bare terminators", ";;", []string{";", ";"}},
		// The first MaxASCIIFrame bytes of noise go; the rest, with the frame it runs into,
		// comes out as one unparsable frame.
		{"long noise", noise + "ID;PC;", []string{strings.Repeat("x", 36) + "ID;", "PC;"}},
		{"nothing", "", nil},
	}
	for _, tc := range cases {
		for _, oneByte := range []bool{false, true} {
			got := splitAll(t, []byte(tc.in), SplitASCII, oneByte)
			if strings.Join(got, "|") != strings.Join(tc.want, "|") || len(got) != len(tc.want) {
				t.Errorf("%s (one byte at a time %v): tokens %q, want %q", tc.name, oneByte, got, tc.want)
			}
		}
	}
}

func FuzzASCIIParse(f *testing.F) {
	for _, tc := range asciiCases {
		f.Add([]byte(tc.frame))
	}
	f.Add([]byte("FA;MD2;\r\nIF;garbage;" + strings.Repeat("z", 80) + "PC100;"))
	f.Add([]byte("FA99999999999;FA0000000000;?;"))
	f.Fuzz(func(t *testing.T, data []byte) {
		sc := bufio.NewScanner(bytes.NewReader(data))
		sc.Split(SplitASCII)
		total := 0
		var frames [][]byte
		for sc.Scan() {
			tok := sc.Bytes()
			total += len(tok)
			if len(tok) == 0 || len(tok) > MaxASCIIFrame || tok[len(tok)-1] != ';' || bytes.IndexByte(tok[:len(tok)-1], ';') >= 0 {
				t.Fatalf("bad token %q", tok)
			}
			if isFiller(tok[0]) {
				t.Fatalf("token %q starts with filler", tok)
			}
			frames = append(frames, bytes.Clone(tok))
		}
		if sc.Err() != nil {
			t.Fatalf("scan: %v", sc.Err())
		}
		if total > len(data) {
			t.Fatalf("tokens hold %d bytes of %d input", total, len(data))
		}
		frames = append(frames, data)
		for _, fr := range frames {
			for _, o := range []ASCIIOpts{{}, nine, {IDDigits: 4}} {
				m, err := ParseASCII(fr, o)
				if err != nil {
					if !errors.Is(err, ErrMalformed) && !errors.Is(err, ErrUnknown) && !errors.Is(err, ErrRange) {
						t.Fatalf("ParseASCII(%q) error %v wraps no sentinel", fr, err)
					}
					continue
				}
				out, err := AppendASCII(nil, m, o)
				if err != nil {
					t.Fatalf("AppendASCII(ParseASCII(%q) = %+v): %v", fr, m, err)
				}
				m2, err := ParseASCII(out, o)
				if err != nil || m2 != m {
					t.Fatalf("round trip %q -> %+v -> %q -> %+v, %v", fr, m, out, m2, err)
				}
			}
		}
	})
}

func BenchmarkParseASCIIStatus(b *testing.B) {
	frame := []byte(statusFrame11)
	for b.Loop() {
		if _, err := ParseASCII(frame, ASCIIOpts{}); err != nil {
			b.Fatal(err)
		}
	}
}

package wire

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
)

// errStarved is what a feeder returns once it has handed out all its input, where a link would
// block waiting for the next byte. A frame that a Scanner has not returned by then has been
// delayed until more input comes, or lost.
var errStarved = errors.New("feeder: no more input")

// feeder is a reader that hands out data in reads of chosen sizes, so that a test controls
// exactly how a link cuts the stream.
type feeder struct {
	data []byte
	pos  int
	// next is the size of the next read; nil hands out everything the caller has room for.
	next func() int
	// end is returned once data is used up: errStarved or io.EOF.
	end error
	// beforeRead, if set, is called with the number of bytes handed out so far each time the
	// Scanner asks for more.
	beforeRead func(delivered int)
}

func (f *feeder) Read(p []byte) (int, error) {
	if f.beforeRead != nil {
		f.beforeRead(f.pos)
	}
	if f.pos == len(f.data) {
		return 0, f.end
	}
	n := min(len(p), len(f.data)-f.pos)
	if f.next != nil {
		n = min(n, f.next())
	}
	copy(p, f.data[f.pos:f.pos+n])
	f.pos += n
	return n, nil
}

// readsOf makes reads of size bytes each.
func readsOf(size int) func() int { return func() int { return size } }

// scanStarved scans in until the feeder runs dry and returns every token it got; the error is
// the Scanner's, errStarved when all went well.
func scanStarved(in []byte, split bufio.SplitFunc, next func() int) ([]string, error) {
	sc := bufio.NewScanner(&feeder{data: in, next: next, end: errStarved})
	sc.Split(split)
	var out []string
	for sc.Scan() {
		out = append(out, sc.Text())
	}
	return out, sc.Err()
}

// TestSplitFrameAfterNoiseNeedsNoMoreInput: a frame that has fully arrived after noise is
// returned before the Scanner reads again. A split function that returned no token for the
// noise it discarded made the Scanner read before it looked at the rest of its buffer, so with
// 8 KiB of noise (twice bufio's initial 4096-byte buffer) the frame waited for some 60 more
// reads, and here, where the input then runs dry, it never came.
func TestSplitFrameAfterNoiseNeedsNoMoreInput(t *testing.T) {
	const kib8 = 8 << 10 // comfortably more than bufio's initial 4096-byte buffer (Go source)
	query := "FA;"
	answer := string(hx("fe fe e0 94 03 00 40 07 14 00 fd"))
	rep := func(unit string, n int) string { return strings.Repeat(unit, n/len(unit)) }
	cases := []struct {
		name  string
		split bufio.SplitFunc
		in    string
		want  []string
	}{
		// 8 KiB is a whole number of MaxASCIIFrame windows, so the noise goes without a trace.
		{"ascii: 8 KiB of noise", SplitASCII, rep("x", kib8) + query, []string{query}},
		{"ascii: 8 KiB of noise ended by ';'", SplitASCII, rep("x", kib8+5) + ";" + query, []string{"xxxxx;", query}},
		{"ascii: 8 KiB of line ends", SplitASCII, rep("\r\n", kib8) + query, []string{query}},
		{"ascii: 8 KiB of noise, line ends and blanks, ended by ';' every few bytes", SplitASCII, rep("\x00 xy\r\n;", kib8) + query,
			append(slices.Repeat([]string{"xy\r\n;"}, kib8/len("\x00 xy\r\n;")), query)},
		{"binary: 8 KiB of zeros", SplitBinary, rep("\x00", kib8) + answer, []string{answer}},
		{"binary: 8 KiB of preamble bytes", SplitBinary, rep("\xfe", kib8) + answer, []string{answer}},
		{"binary: 8 KiB of lone preamble bytes", SplitBinary, rep("\xfe\x01", kib8) + answer, []string{answer}},
		{"binary: 8 KiB of truncated frames", SplitBinary, rep(string(hx("fe fe 94 e0 05 00 40")), kib8) + answer, []string{answer}},
		{"binary: 8 KiB of jammed frames", SplitBinary, rep(string(hx("fe fe 94 e0 fc fc fc fd")), kib8) + answer, []string{answer}},
		{"binary: 8 KiB of short frames", SplitBinary, rep(string(hx("fe fe 94 fd")), kib8) + answer, []string{answer}},
		{"binary: 8 KiB of end bytes", SplitBinary, rep("\xfd", kib8) + answer, []string{answer}},
		{"binary: 8 KiB of overlong frames", SplitBinary,
			rep("\xfe\xfe"+strings.Repeat("\x01", 2*MaxBinaryFrame)+"\xfd", kib8) + answer, []string{answer}},
	}
	reads := []struct {
		name string
		next func() int
	}{
		{"as much as fits", nil},
		{"reads of 1000 bytes", readsOf(1000)},
		{"reads of 64 bytes", readsOf(64)},
		{"one byte at a time", readsOf(1)},
	}
	for _, tc := range cases {
		for _, r := range reads {
			got, err := scanStarved([]byte(tc.in), tc.split, r.next)
			if !errors.Is(err, errStarved) {
				t.Errorf("%s, %s: scan error %v, want the feeder's %v", tc.name, r.name, err, errStarved)
			}
			if !slices.Equal(got, tc.want) {
				t.Errorf("%s, %s: tokens %q before the input ran dry, want %q", tc.name, r.name, got, tc.want)
			}
		}
	}
}

// TestSplitASCIIFirstScanAfterNoise is the plainest form of the check above: one read holds 8
// KiB of noise and a query, and the very first Scan returns the query.
func TestSplitASCIIFirstScanAfterNoise(t *testing.T) {
	in := strings.Repeat("x", 8<<10) + "FA;"
	f := &feeder{data: []byte(in), end: errStarved}
	sc := bufio.NewScanner(f)
	sc.Buffer(make([]byte, len(in)), len(in)) // one read takes it all
	sc.Split(SplitASCII)
	if !sc.Scan() {
		t.Fatalf("first Scan returned no token: %v", sc.Err())
	}
	if got := sc.Text(); got != "FA;" {
		t.Fatalf("first Scan returned %q, want %q", got, "FA;")
	}
}

// TestSplitFloodKeepsBufferSmall: a megabyte of noise goes through a Scanner whose buffer
// cannot grow beyond one frame; a split function that asked to keep noise would make it fail
// with bufio.ErrTooLong.
func TestSplitFloodKeepsBufferSmall(t *testing.T) {
	const flood = 1 << 20 // arbitrary: far more than any buffer a caller would give
	rep := func(unit string) []byte { return bytes.Repeat([]byte(unit), flood/len(unit)) }
	cases := []struct {
		name  string
		split bufio.SplitFunc
		max   int
		noise []byte
		frame string
	}{
		{"ascii noise", SplitASCII, MaxASCIIFrame, rep("x"), "ID;"},
		{"ascii line ends", SplitASCII, MaxASCIIFrame, rep("\r\n"), "ID;"},
		{"binary preambles", SplitBinary, MaxBinaryFrame, rep("\xfe"), string(hx("fe fe e0 94 fb fd"))},
		{"binary overlong frames", SplitBinary, MaxBinaryFrame, rep("\xfe\xfe\x01"), string(hx("fe fe e0 94 fb fd"))},
		{"binary zeros", SplitBinary, MaxBinaryFrame, rep("\x00"), string(hx("fe fe e0 94 fb fd"))},
	}
	for _, tc := range cases {
		in := append(bytes.Clone(tc.noise), tc.frame...)
		sc := bufio.NewScanner(bytes.NewReader(in))
		sc.Buffer(make([]byte, tc.max), tc.max)
		var kept int // the most bytes the split function asked the Scanner to hold back
		sc.Split(func(data []byte, atEOF bool) (int, []byte, error) {
			adv, tok, err := tc.split(data, atEOF)
			if tok == nil {
				kept = max(kept, len(data)-adv)
			}
			return adv, tok, err
		})
		var got []string
		for sc.Scan() {
			got = append(got, sc.Text())
		}
		if err := sc.Err(); err != nil {
			t.Errorf("%s: scan: %v", tc.name, err)
		}
		if !slices.Equal(got, []string{tc.frame}) {
			t.Errorf("%s: tokens %q, want only %q", tc.name, got, tc.frame)
		}
		if kept >= tc.max {
			t.Errorf("%s: split function kept %d bytes of noise, want fewer than %d", tc.name, kept, tc.max)
		}
	}
}

// splitDialect is what the resynchronisation property needs to know about one dialect.
type splitDialect struct {
	split bufio.SplitFunc
	max   int      // the longest token
	valid [][]byte // frames to place in the noise
	// resync is what the noise must end with for a frame after it to survive: a ';' in the
	// ASCII dialect, nothing in the binary one, whose preamble resynchronises by itself.
	resync []byte
	// checkToken reports a token that breaks the split function's promises.
	checkToken func(tok []byte) error
}

var asciiDialect = splitDialect{
	split:  SplitASCII,
	max:    MaxASCIIFrame,
	resync: []byte(";"),
	valid: func() [][]byte {
		var out [][]byte
		for _, tc := range asciiCases {
			out = append(out, []byte(tc.frame))
		}
		return out
	}(),
	checkToken: func(tok []byte) error {
		if len(tok) == 0 || len(tok) > MaxASCIIFrame || tok[len(tok)-1] != ';' || bytes.Count(tok, []byte(";")) != 1 || isFiller(tok[0]) {
			return fmt.Errorf("token %q is not one ';'-terminated frame of at most %d bytes", tok, MaxASCIIFrame)
		}
		return nil
	},
}

var binaryDialect = splitDialect{
	split: SplitBinary,
	max:   MaxBinaryFrame,
	valid: func() [][]byte {
		var out [][]byte
		for _, tc := range binaryCases {
			out = append(out, hx(tc.frame))
		}
		// The longest frame the splitter passes: all data bytes an ordinary value.
		long, err := AppendBinaryFrame(nil, BinaryFrame{To: radioAddr, From: AddrController, Cmd: 0x1a,
			Data: bytes.Repeat([]byte{0x01}, MaxBinaryFrame-minBinaryFrame)})
		if err != nil {
			panic("longest binary frame: " + err.Error())
		}
		return append(out, long)
	}(),
	checkToken: func(tok []byte) error {
		if len(tok) > MaxBinaryFrame {
			return fmt.Errorf("token % x is longer than %d bytes", tok, MaxBinaryFrame)
		}
		if _, err := ParseBinaryFrame(tok); err != nil {
			return fmt.Errorf("token does not parse: %w", err)
		}
		return nil
	},
}

// span is a token and where it starts in the stream.
type span struct {
	at  int
	tok string
}

func (s span) String() string { return fmt.Sprintf("%d:%q", s.at, s.tok) }

// splitWhole cuts stream with split the way a Scanner does when it holds all of it at end of
// input: the reference that every way of cutting the stream into reads must agree with.
func splitWhole(t *testing.T, split bufio.SplitFunc, stream []byte) []span {
	t.Helper()
	var out []span
	for pos := 0; pos < len(stream); {
		data := stream[pos:]
		adv, tok, err := split(data, true)
		if err != nil {
			t.Fatalf("split at %d: %v", pos, err)
		}
		if adv <= 0 || adv > len(data) {
			t.Fatalf("split at %d of %d bytes at end of input advanced %d", pos, len(data), adv)
		}
		if tok != nil {
			out = append(out, span{pos + tokenAt(t, data, tok), string(tok)})
		}
		pos += adv
	}
	return out
}

// tokenAt says where in data the token lies; the split functions return sub-slices of their
// input, never copies.
func tokenAt(t *testing.T, data, tok []byte) int {
	t.Helper()
	at := cap(data) - cap(tok)
	if at < 0 || at+len(tok) > len(data) || !bytes.Equal(data[at:at+len(tok)], tok) {
		t.Fatalf("token %q is not a part of the input %q", tok, clip(data))
	}
	return at
}

// checkResync is the property behind both fuzz targets. It builds a stream of noise with
// valid frames placed after clean resynchronisation points, cuts it into reads of sizes drawn
// from seed, scans it, and requires that
//
//   - every placed frame comes out as a token of its own, at its place, in order;
//   - every token is bytes of the stream, at increasing places, and keeps the split function's
//     promises (nothing invented, nothing reordered);
//   - no frame is still in the Scanner's buffer when it reads again (nothing delayed);
//   - the split function never asks to hold back a whole frame's worth of bytes, and a Scanner
//     whose buffer cannot grow beyond one frame is enough (memory bounded);
//   - the tokens do not depend on how the stream was cut into reads.
func checkResync(t *testing.T, d splitDialect, noise, layout []byte, seed uint64) {
	const maxFrames = 64 // enough for every interleaving; keeps one run fast
	if len(layout) > maxFrames {
		layout = layout[:maxFrames]
	}
	rng := rand.New(rand.NewPCG(seed, seed^0x5eed))

	cuts := make([]int, len(layout))
	for i := range cuts {
		cuts[i] = rng.IntN(len(noise) + 1)
	}
	slices.Sort(cuts)
	var stream []byte
	var placed []span
	prev := 0
	for i, b := range layout {
		if piece := noise[prev:cuts[i]]; len(piece) > 0 {
			stream = append(stream, piece...)
			stream = append(stream, d.resync...)
		}
		prev = cuts[i]
		f := d.valid[int(b)%len(d.valid)]
		placed = append(placed, span{len(stream), string(f)})
		stream = append(stream, f...)
	}
	stream = append(stream, noise[prev:]...)

	want := splitWhole(t, d.split, stream)

	// Reads of 1 byte, a few bytes, about a frame, or as much as the buffer holds.
	readSizes := []int{1, 7, MaxASCIIFrame, 1 << 20}
	for _, tight := range []bool{false, true} {
		limit := readSizes[rng.IntN(len(readSizes))]
		in := &feeder{data: stream, end: io.EOF, next: func() int { return 1 + rng.IntN(limit) }}
		var got []span
		seen := map[int]bool{} // where tokens started
		checked := 0           // placed frames known to have come out before a read
		in.beforeRead = func(delivered int) {
			for ; checked < len(placed); checked++ {
				p := placed[checked]
				if p.at+len(p.tok) > delivered {
					break
				}
				if !seen[p.at] {
					t.Fatalf("tight buffer %v, reads up to %d bytes: frame %q at %d was in the Scanner's buffer (%d bytes read) but the Scanner read again",
						tight, limit, p.tok, p.at, delivered)
				}
			}
		}
		sc := bufio.NewScanner(in)
		if tight {
			sc.Buffer(make([]byte, d.max), d.max)
		}
		base := 0 // where the data passed to the split function starts in the stream
		sc.Split(func(data []byte, atEOF bool) (int, []byte, error) {
			adv, tok, err := d.split(data, atEOF)
			if err != nil {
				t.Fatalf("split: %v", err)
			}
			if adv < 0 || adv > len(data) {
				t.Fatalf("split of %d bytes advanced %d", len(data), adv)
			}
			if tok != nil {
				if adv == 0 {
					t.Fatalf("split returned token %q without advancing", tok)
				}
				at := base + tokenAt(t, data, tok)
				got = append(got, span{at, string(tok)})
				seen[at] = true
			} else if !atEOF && len(data)-adv >= d.max {
				t.Fatalf("split holds back %d bytes, a frame's worth (%d) or more", len(data)-adv, d.max)
			}
			base += adv
			return adv, tok, err
		})
		for sc.Scan() {
		}
		if err := sc.Err(); err != nil {
			t.Fatalf("tight buffer %v: scan: %v", tight, err)
		}

		end := 0
		for _, s := range got {
			if s.at < end {
				t.Fatalf("token %q at %d overlaps the token before, which ends at %d", s.tok, s.at, end)
			}
			if err := d.checkToken([]byte(s.tok)); err != nil {
				t.Fatal(err)
			}
			end = s.at + len(s.tok)
		}
		i := 0
		for _, p := range placed {
			for i < len(got) && got[i].at < p.at {
				i++
			}
			if i == len(got) || got[i] != p {
				t.Fatalf("frame %q placed at %d did not come out; tokens %v", p.tok, p.at, got)
			}
		}
		if !slices.Equal(got, want) {
			t.Fatalf("tight buffer %v, reads up to %d bytes: tokens\n%v\ndiffer from those of the whole stream at once\n%v",
				tight, limit, got, want)
		}
	}
}

// FuzzSplitASCIIResync: ASCII frames placed in arbitrary noise, each after a ';', all come out
// intact, in order and at once, however the reads cut the stream.
func FuzzSplitASCIIResync(f *testing.F) {
	rng := rand.New(rand.NewPCG(1, 2)) // fixed seed: the corpus is the same on every run
	randomNoise := func(n int) []byte {
		b := make([]byte, n)
		for i := range b {
			b[i] = byte(rng.Uint32())
		}
		return b
	}
	f.Add(bytes.Repeat([]byte("x"), 8<<10), []byte{0}, uint64(1))
	f.Add(bytes.Repeat([]byte("x"), 8<<10+37), []byte{0, 5, 30}, uint64(2))
	f.Add(bytes.Repeat([]byte("\r\n"), 4<<10), []byte{1, 2, 3, 4, 5}, uint64(3))
	f.Add([]byte("garbage;FA;MD2;no end here"+strings.Repeat("z", 200)+"IF;;;"), []byte{7, 30, 31, 0}, uint64(4))
	f.Add(randomNoise(8<<10), []byte{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 30, 31}, uint64(5))
	f.Add(randomNoise(100), []byte{30}, uint64(6))
	f.Add([]byte{}, []byte{0, 1, 2, 30, 31}, uint64(7))
	f.Add(bytes.Repeat([]byte("\x00 \t"), 300), []byte{31, 31}, uint64(8))
	f.Fuzz(func(t *testing.T, noise, layout []byte, seed uint64) {
		checkResync(t, asciiDialect, noise, layout, seed)
	})
}

// FuzzSplitBinaryResync: binary frames placed anywhere in arbitrary noise all come out intact,
// in order and at once, however the reads cut the stream.
func FuzzSplitBinaryResync(f *testing.F) {
	rng := rand.New(rand.NewPCG(3, 4)) // fixed seed: the corpus is the same on every run
	randomNoise := func(n int) []byte {
		b := make([]byte, n)
		for i := range b {
			b[i] = byte(rng.Uint32())
		}
		return b
	}
	// Random bytes with framing bytes far more common than chance would make them.
	framingNoise := func(n int) []byte {
		b := randomNoise(n)
		for i := range b {
			switch b[i] % 4 {
			case 0:
				b[i] = binPreamble
			case 1:
				b[i] = []byte{binEnd, binJam}[b[i]>>7]
			}
		}
		return b
	}
	f.Add(bytes.Repeat([]byte{0}, 8<<10), []byte{0}, uint64(1))
	f.Add(bytes.Repeat([]byte{binPreamble}, 8<<10), []byte{0, 5, 23}, uint64(2))
	f.Add(bytes.Repeat([]byte{binPreamble, 0x01}, 4<<10), []byte{1, 2}, uint64(3))
	f.Add(bytes.Repeat(hx("fe fe 94 e0 05 00 40"), 500), []byte{3, 4, 5}, uint64(4))
	f.Add(bytes.Repeat(hx("fe fe 94 e0 fc fc fc fd"), 500), []byte{6, 7}, uint64(5))
	f.Add(append(hx("fe fe"), bytes.Repeat([]byte{0x01}, 3*MaxBinaryFrame)...), []byte{23, 0, 23}, uint64(6))
	f.Add(hx("00 fe fe fe 94 e0 05 00 40 fe fe 94 e0 03 fd fc fc fc fe fe e0 94 fb fd fe"), []byte{8, 9, 10, 11}, uint64(7))
	f.Add(randomNoise(8<<10), []byte{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 23}, uint64(8))
	f.Add(framingNoise(8<<10), []byte{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 23}, uint64(9))
	f.Add([]byte{}, []byte{0, 1, 2, 23}, uint64(10))
	f.Fuzz(func(t *testing.T, noise, layout []byte, seed uint64) {
		checkResync(t, binaryDialect, noise, layout, seed)
	})
}

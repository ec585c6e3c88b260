package memmap

import (
	"bytes"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"slices"
	"strconv"
	"strings"

	"github.com/tankd/tankd/controller/store"
)

// The map file's signature, the version this build writes, and the older one it still reads.
const (
	fileMagic   = "tankd-tunemap"
	fileVersion = 2
	// fileVersion1 had no calib line: a map read from it starts from the options' guesses.
	fileVersion1 = 1
	// PrevSuffix is appended to a map file's path to name the previous good copy.
	PrevSuffix = store.PrevSuffix
)

// Errors of Load, for errors.Is. ErrCorrupt and ErrUsedPrevious are the store package's own
// values, so that either name matches.
var (
	// ErrCorrupt: no usable map file: it fails its checksum or does not parse (torn, truncated
	// or edited), and so does the previous copy, or there is none.
	ErrCorrupt = store.ErrCorrupt
	// ErrVersion: a map file was written in a format version this build does not read. Load
	// does not fall back to the previous copy over it, so as not to lose newer data.
	ErrVersion = errors.New("unsupported map file version")
	// ErrUsedPrevious: the main copy was missing or unusable, and the map came from the
	// previous copy. Load returns a usable map with it; the caller should log it.
	ErrUsedPrevious = store.ErrUsedPrevious
)

// Save writes the map to path atomically with store.WriteFile: a crash at any moment leaves
// either the old or the new file in place, never a mix. A good file already at path is kept as
// path+PrevSuffix. Only one writer may save to a path at a time.
func (m *Map) Save(path string) error {
	if err := store.WriteFile(path, m.encodeBody()); err != nil {
		return fmt.Errorf("memmap: save: %w", err)
	}
	return nil
}

// Load reads the map saved at path with Save. A missing or unusable file (one that fails its
// checksum or does not parse) falls back to the previous copy: then the map is returned together
// with an error wrapping ErrUsedPrevious and saying what was wrong. With neither file there (the
// first run), Load returns an empty map and no error. If no usable map is found, Load returns
// nil and an error wrapping ErrCorrupt, ErrVersion or the I/O error; the files are left alone
// for inspection. A main file of another format version is not passed over for the previous
// copy: Load returns ErrVersion.
func Load(path string, opts Options) (*Map, error) {
	o, err := opts.resolve()
	if err != nil {
		return nil, err
	}
	m, err := store.Decode(path, func(body []byte) (*Map, error) { return decodeBody(body, o) })
	switch {
	case err == nil:
		return m, nil
	case errors.Is(err, ErrUsedPrevious):
		return m, fmt.Errorf("memmap: load: %w", err)
	case errors.Is(err, fs.ErrNotExist):
		return &Map{o: o}, nil
	}
	return nil, fmt.Errorf("memmap: load: %w", err)
}

// encode returns the map file: the body and its checksum line; see FORMAT in doc.go.
func (m *Map) encode() []byte { return store.AppendChecksum(m.encodeBody()) }

// encodeBody writes the map in the file format, all but the checksum line.
func (m *Map) encodeBody() []byte {
	m.mu.RLock()
	defer m.mu.RUnlock()
	b := make([]byte, 0, 256+320*len(m.ents))
	b = fmt.Appendf(b, "%s %d\n", fileMagic, fileVersion)
	f := &m.flt
	b = append(b, "drift at="...)
	if f.started {
		b = appendTime(b, f.at)
	} else {
		b = append(b, '-')
	}
	b = append(b, " x="...)
	b = appendVec(b, &f.x)
	b = append(b, " p="...)
	b = appendSym(b, &f.p)
	b = append(b, " tref="...)
	b = appendOptCelsius(b, f.tref, f.hasRef)
	b = append(b, " trec="...)
	b = appendOptCelsius(b, f.trec, f.hasRec)
	b = append(b, "\ncalib"...)
	for k, name := range calibNames {
		b = append(b, ' ')
		b = append(b, name...)
		b = append(b, '=')
		b = appendFloat(b, m.cal.w[k])
		b = append(b, ',')
		b = appendFloat(b, m.cal.s[k])
	}
	b = fmt.Appendf(b, "\npoints %d\n", len(m.ents))

	order := make([]int, len(m.ents))
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(i, j int) int { return cmpFreq(m.ents[i].pt.Freq, m.ents[j].pt.Freq) })
	for _, i := range order {
		e := &m.ents[i]
		b = append(b, "point f="...)
		b = appendHz(b, e.pt.Freq)
		b = append(b, " pos="...)
		b = strconv.AppendInt(b, e.pt.Pos, 10)
		b = append(b, " at="...)
		if e.pt.At.IsZero() {
			b = append(b, '-')
		} else {
			b = appendTime(b, e.pt.At)
		}
		b = append(b, " temp="...)
		if e.pt.HasTemp {
			b = appendCelsius(b, e.pt.Temp)
		} else {
			b = append(b, '-')
		}
		b = append(b, " swr="...)
		b = appendOptFloat(b, e.pt.SWR)
		b = append(b, " q="...)
		b = appendOptFloat(b, e.pt.Q)
		b = append(b, " eps="...)
		b = appendFloat(b, e.eps)
		b = append(b, " off="...)
		b = appendFloat(b, e.off)
		b = append(b, " dt="...)
		b = appendFloat(b, e.dT)
		b = append(b, " p="...)
		b = appendSym(b, &e.p)
		b = append(b, " c="...)
		b = appendMat(b, &e.c)
		b = append(b, '\n')
	}
	return b
}

func appendOptFloat(b []byte, v float64) []byte {
	if v == 0 {
		return append(b, '-')
	}
	return appendFloat(b, v)
}

func appendOptCelsius(b []byte, c float64, has bool) []byte {
	if !has {
		return append(b, '-')
	}
	return appendFloat(b, c)
}

func appendVec(b []byte, v *vec) []byte {
	for i := range ns {
		if i > 0 {
			b = append(b, ',')
		}
		b = appendFloat(b, v[i])
	}
	return b
}

// appendSym writes the upper triangle of a symmetric matrix, row by row.
func appendSym(b []byte, p *mat) []byte {
	for i := range ns {
		for j := i; j < ns; j++ {
			if i+j > 0 {
				b = append(b, ',')
			}
			b = appendFloat(b, p[i][j])
		}
	}
	return b
}

func appendMat(b []byte, p *mat) []byte {
	for i := range ns {
		for j := range ns {
			if i+j > 0 {
				b = append(b, ',')
			}
			b = appendFloat(b, p[i][j])
		}
	}
	return b
}

// verify checks a whole map file, its checksum line and then its signature, and returns the
// body the checksum covers.
func verify(data []byte) ([]byte, error) {
	body, err := store.Verify(data)
	if err != nil {
		return nil, err
	}
	if err := checkSignature(body); err != nil {
		return nil, err
	}
	return body, nil
}

// checkSignature checks the first line of a verified body. The checksum framing is the same in
// every version, so a body that verifies but carries another version is a newer file, told
// apart from a damaged one.
func checkSignature(body []byte) error {
	first, _, _ := bytes.Cut(body, []byte{'\n'})
	magic, ver, ok := strings.Cut(string(first), " ")
	if !ok || magic != fileMagic {
		return fmt.Errorf("%w: no %s signature", ErrCorrupt, fileMagic)
	}
	if v, err := strconv.Atoi(ver); err != nil || v < 1 || strconv.Itoa(v) != ver {
		return fmt.Errorf("%w: bad version %q", ErrCorrupt, ver)
	} else if v != fileVersion && v != fileVersion1 {
		return fmt.Errorf("%w %d: this build reads versions %d and %d", ErrVersion, v, fileVersion1, fileVersion)
	}
	return nil
}

// decode parses a whole map file.
func decode(data []byte, o resolved) (*Map, error) {
	body, err := verify(data)
	if err != nil {
		return nil, err
	}
	return parseBody(body, o)
}

// decodeBody parses a verified body.
func decodeBody(body []byte, o resolved) (*Map, error) {
	if err := checkSignature(body); err != nil {
		return nil, err
	}
	return parseBody(body, o)
}

// lineErr reports a bad line of the body.
func lineErr(n int, format string, args ...any) error {
	return fmt.Errorf("%w: line %d: %s", ErrCorrupt, n, fmt.Sprintf(format, args...))
}

// fields splits a line into its keyword and its key=value fields, which must be keys, in order.
func fields(n int, line, keyword string, keys ...string) ([]string, error) {
	parts := strings.Split(line, " ")
	if parts[0] != keyword {
		return nil, lineErr(n, "want a %q line", keyword)
	}
	if len(parts) != len(keys)+1 {
		return nil, lineErr(n, "%s: want %d fields, got %d", keyword, len(keys), len(parts)-1)
	}
	vals := make([]string, len(keys))
	for i, k := range keys {
		v, ok := strings.CutPrefix(parts[i+1], k+"=")
		if !ok {
			return nil, lineErr(n, "%s: want field %s=", keyword, k)
		}
		vals[i] = v
	}
	return vals, nil
}

// parseBody parses the lines the checksum covers. It is separate from verify so that it can be
// fuzzed beyond the checksum.
func parseBody(body []byte, o resolved) (*Map, error) {
	lines := strings.Split(strings.TrimSuffix(string(body), "\n"), "\n")
	head := 3 // the signature, the drift line, the calib line (version 2 on)
	switch lines[0] {
	case fmt.Sprintf("%s %d", fileMagic, fileVersion):
	case fmt.Sprintf("%s %d", fileMagic, fileVersion1):
		head = 2
	default:
		return nil, lineErr(1, "want the signature %s %d (or %d)", fileMagic, fileVersion, fileVersion1)
	}
	if len(lines) < head+1 {
		return nil, fmt.Errorf("%w: %d lines, want at least %d", ErrCorrupt, len(lines), head+1)
	}
	m := &Map{o: o}
	v, err := fields(2, lines[1], "drift", "at", "x", "p", "tref", "trec")
	if err != nil {
		return nil, err
	}
	f := &m.flt
	if v[0] != "-" {
		if f.at, err = parseTime(v[0]); err != nil {
			return nil, lineErr(2, "at: %v", err)
		}
		f.started = true
	}
	xs, err := parseFloats(v[1], ns)
	if err != nil {
		return nil, lineErr(2, "x: %v", err)
	}
	copy(f.x[:], xs)
	if f.p, err = parseSym(v[2]); err != nil {
		return nil, lineErr(2, "p: %v", err)
	}
	if f.tref, f.hasRef, err = parseOptFloat(v[3]); err != nil {
		return nil, lineErr(2, "tref: %v", err)
	}
	if f.trec, f.hasRec, err = parseOptFloat(v[4]); err != nil {
		return nil, lineErr(2, "trec: %v", err)
	}

	if head == 3 {
		if m.cal, err = parseCalib(3, lines[2]); err != nil {
			return nil, err
		}
	}

	cnt, ok := strings.CutPrefix(lines[head], "points ")
	n, err := strconv.Atoi(cnt)
	if !ok || err != nil || n < 0 || strconv.Itoa(n) != cnt {
		return nil, lineErr(head+1, "want \"points N\"")
	}
	if len(lines) != head+1+n {
		return nil, fmt.Errorf("%w: %d point lines, the header says %d", ErrCorrupt, len(lines)-head-1, n)
	}
	m.ents = make([]entry, 0, n)
	for i, line := range lines[head+1:] {
		e, err := parsePoint(head+2+i, line)
		if err != nil {
			return nil, err
		}
		m.ents = append(m.ents, e)
	}
	slices.SortFunc(m.ents, func(a, b entry) int { return cmpFreq(a.pt.Freq, b.pt.Freq) })
	for i := 1; i < len(m.ents); i++ {
		if m.ents[i].pt.Freq == m.ents[i-1].pt.Freq {
			return nil, fmt.Errorf("%w: two points at %v", ErrCorrupt, m.ents[i].pt.Freq)
		}
	}
	slices.SortStableFunc(m.ents, func(a, b entry) int {
		switch {
		case a.x < b.x:
			return -1
		case a.x > b.x:
			return 1
		}
		return 0
	})
	for len(m.ents) > m.o.maxPoints {
		m.evict(-1)
	}
	m.refit()
	return m, nil
}

func parsePoint(n int, line string) (entry, error) {
	v, err := fields(n, line, "point", "f", "pos", "at", "temp", "swr", "q", "eps", "off", "dt", "p", "c")
	if err != nil {
		return entry{}, err
	}
	var p Point
	if p.Freq, err = parseHz(v[0]); err != nil {
		return entry{}, lineErr(n, "f: %v", err)
	}
	if p.Pos, err = strconv.ParseInt(v[1], 10, 64); err != nil {
		return entry{}, lineErr(n, "pos: not an integer")
	}
	if v[2] != "-" {
		if p.At, err = parseTime(v[2]); err != nil {
			return entry{}, lineErr(n, "at: %v", err)
		}
	}
	if v[3] != "-" {
		if p.Temp, err = parseCelsius(v[3]); err != nil {
			return entry{}, lineErr(n, "temp: %v", err)
		}
		p.HasTemp = true
	}
	if p.SWR, _, err = parseOptFloat(v[4]); err != nil {
		return entry{}, lineErr(n, "swr: %v", err)
	}
	if p.Q, _, err = parseOptFloat(v[5]); err != nil {
		return entry{}, lineErr(n, "q: %v", err)
	}
	if err := p.validate(); err != nil {
		return entry{}, lineErr(n, "%v", err)
	}
	e := newEntry(p)
	var eps, off float64
	if eps, err = parseFinite(v[6]); err != nil || math.Abs(eps) > 0.5 {
		return entry{}, lineErr(n, "eps: not a fraction within ±0.5")
	}
	if off, err = parseFinite(v[7]); err != nil {
		return entry{}, lineErr(n, "off: %v", err)
	}
	if e.dT, err = parseFinite(v[8]); err != nil {
		return entry{}, lineErr(n, "dt: %v", err)
	}
	if e.p, err = parseSym(v[9]); err != nil {
		return entry{}, lineErr(n, "p: %v", err)
	}
	if e.c, err = parseMat(v[10]); err != nil {
		return entry{}, lineErr(n, "c: %v", err)
	}
	e.place(eps, off)
	return e, nil
}

func parseOptFloat(s string) (float64, bool, error) {
	if s == "-" {
		return 0, false, nil
	}
	v, err := parseFinite(s)
	return v, err == nil, err
}

func parseFloats(s string, n int) ([]float64, error) {
	parts := strings.Split(s, ",")
	if len(parts) != n {
		return nil, fmt.Errorf("want %d numbers, got %d", n, len(parts))
	}
	out := make([]float64, n)
	for i, p := range parts {
		v, err := parseFinite(p)
		if err != nil {
			return nil, err
		}
		out[i] = v
	}
	return out, nil
}

// parseSym reads a covariance matrix's upper triangle; the variances must not be negative.
func parseSym(s string) (mat, error) {
	v, err := parseFloats(s, ns*(ns+1)/2)
	if err != nil {
		return mat{}, err
	}
	var p mat
	k := 0
	for i := range ns {
		for j := i; j < ns; j++ {
			p[i][j], p[j][i] = v[k], v[k]
			k++
		}
		if p[i][i] < 0 {
			return mat{}, errors.New("negative variance")
		}
	}
	return p, nil
}

func parseMat(s string) (mat, error) {
	v, err := parseFloats(s, ns*ns)
	if err != nil {
		return mat{}, err
	}
	var p mat
	for i := range ns * ns {
		p[i/ns][i%ns] = v[i]
	}
	return p, nil
}

// calibNames are the keys of the calib line, one for each source of error, in order.
var calibNames = [nComp]string{cShape: "shape", cEps: "eps", cOff: "off", cNoise: "noise", cPrior: "prior"}

// parseCalib reads the calib line: for each source, its evidence as weight,sum; both finite
// and not negative.
func parseCalib(n int, line string) (calib, error) {
	var c calib
	v, err := fields(n, line, "calib", calibNames[:]...)
	if err != nil {
		return c, err
	}
	for k, s := range v {
		xs, err := parseFloats(s, 2)
		if err != nil {
			return c, lineErr(n, "%s: %v", calibNames[k], err)
		}
		if xs[0] < 0 || xs[1] < 0 {
			return c, lineErr(n, "%s: evidence %g,%g is negative", calibNames[k], xs[0], xs[1])
		}
		c.w[k], c.s[k] = xs[0], xs[1]
	}
	return c, nil
}

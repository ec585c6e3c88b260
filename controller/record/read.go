package record

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller/motion"
)

// maxLine bounds one line, so that a file that is not a recording cannot make the reader buffer
// without end.
const maxLine = 64 << 10

// Reader reads one recording. NewReader reads and checks everything up to the column line;
// Next then yields the samples in file order. It is not safe for concurrent use.
type Reader struct {
	sc   *bufio.Scanner
	line int
	h    Header
	prev time.Duration
	err  error // sticky: io.EOF at the end, or the first error
}

// NewReader reads the header of a recording from r. The error is a *ParseError for a malformed
// header; it wraps ErrVersion for a version this package does not read.
func NewReader(r io.Reader) (*Reader, error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 4096), maxLine)
	rd := &Reader{sc: sc, prev: -1}
	if err := rd.readHeader(); err != nil {
		return nil, err
	}
	return rd, nil
}

// Header returns the recording's header. Its Meta map is the reader's own: do not modify it.
func (r *Reader) Header() Header { return r.h }

// Next returns the next sample, or io.EOF after the last one. Any other error is a *ParseError
// or a read error; once Next has failed it keeps returning the same error.
func (r *Reader) Next() (Sample, error) {
	if r.err != nil {
		return Sample{}, r.err
	}
	s, err := r.next()
	if err != nil {
		r.err = err
	}
	return s, err
}

// ReadAll reads a whole recording. On an error after the header it also returns the header and
// the samples before the bad line.
func ReadAll(r io.Reader) (Header, []Sample, error) {
	rd, err := NewReader(r)
	if err != nil {
		return Header{}, nil, err
	}
	var all []Sample
	for {
		s, err := rd.Next()
		if errors.Is(err, io.EOF) {
			return rd.h, all, nil
		}
		if err != nil {
			return rd.h, all, err
		}
		all = append(all, s)
	}
}

func (r *Reader) next() (Sample, error) {
	line, err := r.content()
	if err != nil {
		return Sample{}, err
	}
	if strings.HasPrefix(line, "@") {
		return Sample{}, r.fail(errors.New("metadata after the column line"))
	}
	f := fields(line)
	if len(f) != len(columns) {
		return Sample{}, r.fail(fmt.Errorf("sample has %d fields, want %d (%s)", len(f), len(columns),
			strings.Join(columns[:], " ")))
	}
	var s Sample
	t, err := parseFixed(f[0], secondScale)
	if err != nil {
		return Sample{}, r.fail(fmt.Errorf("t_s %q: %w", f[0], err))
	}
	s.T = time.Duration(t)
	if s.Step, err = strconv.ParseInt(f[1], 10, 64); err != nil {
		return Sample{}, r.fail(fmt.Errorf("step %q: want a decimal integer", f[1]))
	}
	switch f[2] {
	case "+":
		s.Dir = motion.Up
	case "-":
		s.Dir = motion.Down
	default:
		return Sample{}, r.fail(fmt.Errorf("dir %q: want + or -", f[2]))
	}
	hz, err := parseFixed(f[3], hertzScale)
	if err != nil {
		return Sample{}, r.fail(fmt.Errorf("freq_hz %q: %w", f[3], err))
	}
	s.Freq = physic.Frequency(hz)
	fwd, err := parseFixed(f[4], wattScale)
	if err != nil {
		return Sample{}, r.fail(fmt.Errorf("fwd_w %q: %w", f[4], err))
	}
	s.Forward = physic.Power(fwd)
	ref, err := parseFixed(f[5], wattScale)
	if err != nil {
		return Sample{}, r.fail(fmt.Errorf("ref_w %q: %w", f[5], err))
	}
	s.Reflected = physic.Power(ref)
	if s.SWR, err = strconv.ParseFloat(f[6], 64); err != nil || !decimalFloat(f[6]) {
		return Sample{}, r.fail(fmt.Errorf("swr %q: want a number >= 1, inf or nan", f[6]))
	}
	if err := s.check(r.prev); err != nil {
		return Sample{}, r.fail(err)
	}
	r.prev = s.T
	return s, nil
}

// decimalFloat reports whether s is spelt as the format allows: decimal digits with an optional
// point and exponent, or the words inf and nan. ParseFloat alone would also take hexadecimal.
func decimalFloat(s string) bool {
	if strings.EqualFold(s, "inf") || strings.EqualFold(s, "nan") {
		return true
	}
	return s != "" && strings.Trim(s, "0123456789.eE+-") == ""
}

func (r *Reader) readHeader() error {
	if !r.scan() {
		if err := r.sc.Err(); err != nil {
			return r.readErr(err)
		}
		r.line = 1
		return r.fail(fmt.Errorf("empty file, want %q first", signature+" "+strconv.Itoa(Version)))
	}
	first := strings.TrimPrefix(r.sc.Text(), "\uFEFF")
	f := fields(first)
	if len(f) != 2 || f[0] != signature {
		return r.fail(fmt.Errorf("not a sweep recording: first line %q, want %q", clip(first),
			signature+" "+strconv.Itoa(Version)))
	}
	if v, err := strconv.Atoi(f[1]); err != nil || v != Version {
		return r.fail(fmt.Errorf("version %q: %w (this package reads version %d)", f[1], ErrVersion, Version))
	}
	r.h.Version = Version
	for {
		line, err := r.content()
		if errors.Is(err, io.EOF) {
			return r.fail(errors.New("file ends before the column line"))
		}
		if err != nil {
			return err
		}
		if rest, ok := strings.CutPrefix(line, "@"); ok {
			if err := r.meta(rest); err != nil {
				return r.fail(err)
			}
			continue
		}
		if f := fields(line); !slices.Equal(f, columns[:]) {
			return r.fail(fmt.Errorf("column line %q, want %q", clip(line), strings.Join(columns[:], " ")))
		}
		if r.h.Start.IsZero() {
			return r.fail(fmt.Errorf("no %q metadata before the column line", keyStart))
		}
		return nil
	}
}

// meta parses the pairs of one metadata line into r.h.
func (r *Reader) meta(s string) error {
	for {
		s = strings.TrimLeft(s, " \t")
		if s == "" {
			return nil
		}
		i := strings.IndexByte(s, '=')
		if i < 0 {
			return fmt.Errorf("metadata %q: want key=value", clip(s))
		}
		k := s[:i]
		s = s[i+1:]
		if !validKey(k) {
			return fmt.Errorf("metadata key %q: want a letter, then letters, digits, '_', '.' or '-'", clip(k))
		}
		var v string
		if strings.HasPrefix(s, `"`) {
			q, err := strconv.QuotedPrefix(s)
			if err == nil {
				v, err = strconv.Unquote(q)
			}
			if err != nil {
				return fmt.Errorf("metadata %s: bad quoted value", k)
			}
			s = s[len(q):]
			if s != "" && s[0] != ' ' && s[0] != '\t' {
				return fmt.Errorf("metadata %s: want a blank after the quoted value", k)
			}
		} else {
			end := strings.IndexAny(s, " \t")
			if end < 0 {
				end = len(s)
			}
			v, s = s[:end], s[end:]
			if v == "" {
				return fmt.Errorf("metadata %s: empty value, write \"\"", k)
			}
			if strings.Contains(v, `"`) {
				return fmt.Errorf("metadata %s: a bare value cannot hold '\"': quote it", k)
			}
		}
		if err := r.setMeta(k, v); err != nil {
			return err
		}
	}
}

func (r *Reader) setMeta(k, v string) error {
	if k == keyStart {
		if !r.h.Start.IsZero() {
			return fmt.Errorf("metadata %s given twice", k)
		}
		t, err := time.Parse(time.RFC3339, v)
		if err != nil {
			return fmt.Errorf("metadata start %q: want an RFC 3339 time such as 2026-01-01T00:00:00Z", clip(v))
		}
		if t.IsZero() {
			// The zero instant is how Header says "no start": a file cannot mean it.
			return fmt.Errorf("metadata start %q: the year-1 zero instant is not a start time", v)
		}
		r.h.Start = t
		return nil
	}
	if _, dup := r.h.Meta[k]; dup {
		return fmt.Errorf("metadata %s given twice", k)
	}
	if r.h.Meta == nil {
		r.h.Meta = make(map[string]string)
	}
	r.h.Meta[k] = v
	return nil
}

// content returns the next line that is not a comment, without trailing blanks, or io.EOF.
func (r *Reader) content() (string, error) {
	for r.scan() {
		line := strings.TrimRight(r.sc.Text(), " \t\r")
		if !utf8.ValidString(line) {
			return "", r.fail(errors.New("not UTF-8 text"))
		}
		if t := strings.TrimLeft(line, " \t"); t == "" || t[0] == '#' {
			continue
		}
		return line, nil
	}
	if err := r.sc.Err(); err != nil {
		return "", r.readErr(err)
	}
	return "", io.EOF
}

// scan advances to the next line. A line cut short by a read error counts as that error: it is
// the unterminated remainder before the failure, not the file's last line.
func (r *Reader) scan() bool {
	if r.sc.Scan() && r.sc.Err() == nil {
		r.line++
		return true
	}
	return false
}

func (r *Reader) fail(err error) error { return &ParseError{Line: r.line, Err: err} }

// readErr reports a failure of the scanner, which happens on the line after the last one read.
func (r *Reader) readErr(err error) error {
	if errors.Is(err, bufio.ErrTooLong) {
		return &ParseError{Line: r.line + 1, Err: fmt.Errorf("line longer than %d bytes", maxLine)}
	}
	return fmt.Errorf("record: read line %d: %w", r.line+1, err)
}

// fields splits s at runs of spaces and tabs, the only separators the format knows.
func fields(s string) []string {
	return strings.FieldsFunc(s, func(r rune) bool { return r == ' ' || r == '\t' })
}

// clip shortens s for an error message.
func clip(s string) string {
	const n = 40
	if len(s) <= n {
		return s
	}
	i := n
	for i > 0 && !utf8.RuneStart(s[i]) {
		i--
	}
	return s[:i] + "..."
}

package record

import (
	"bufio"
	"fmt"
	"io"
	"maps"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"
)

// Writer writes one recording. It buffers: call Flush when done. It is not safe for concurrent
// use.
type Writer struct {
	w    *bufio.Writer
	prev time.Duration // time of the last sample, -1 before the first
	buf  []byte
	err  error // the first write error; every later call returns it
}

// NewWriter checks h and writes the signature, the metadata and the column line to w.
func NewWriter(w io.Writer, h Header) (*Writer, error) {
	if err := h.check(); err != nil {
		return nil, fmt.Errorf("record: header: %w", err)
	}
	wr := &Writer{w: bufio.NewWriter(w), prev: -1}
	start := h.Start
	if _, off := start.Zone(); off%60 != 0 {
		start = start.UTC() // RFC 3339 offsets have no seconds: the instant would shift
	}
	b := fmt.Appendf(nil, "%s %d\n@ %s=%s\n", signature, Version, keyStart,
		start.Format(time.RFC3339Nano))
	for _, k := range slices.Sorted(maps.Keys(h.Meta)) {
		b = append(b, "@ "...)
		b = append(b, k...)
		b = append(b, '=')
		b = appendValue(b, h.Meta[k])
		b = append(b, '\n')
	}
	b = append(b, strings.Join(columns[:], " ")...)
	b = append(b, '\n')
	if _, err := wr.w.Write(b); err != nil {
		return nil, fmt.Errorf("record: write header: %w", err)
	}
	return wr, nil
}

// Write appends one sample. Its time must not be before the previous sample's.
func (w *Writer) Write(s Sample) error {
	if w.err != nil {
		return w.err
	}
	if err := s.check(w.prev); err != nil {
		return fmt.Errorf("record: write sample: %w", err)
	}
	b := appendFixed(w.buf[:0], int64(s.T), secondScale, 6)
	b = append(b, ' ')
	b = strconv.AppendInt(b, s.Step, 10)
	b = append(b, ' ')
	b = append(b, s.Dir.String()...)
	b = append(b, ' ')
	b = appendFixed(b, int64(s.Freq), hertzScale, 0)
	b = append(b, ' ')
	b = appendFixed(b, int64(s.Forward), wattScale, 4)
	b = append(b, ' ')
	b = appendFixed(b, int64(s.Reflected), wattScale, 4)
	b = append(b, ' ')
	b = appendSWR(b, s.SWR)
	b = append(b, '\n')
	w.buf = b
	if _, err := w.w.Write(b); err != nil {
		w.err = fmt.Errorf("record: write sample: %w", err)
		return w.err
	}
	w.prev = s.T
	return nil
}

// Flush writes any buffered data to the underlying writer.
func (w *Writer) Flush() error {
	if w.err != nil {
		return w.err
	}
	if err := w.w.Flush(); err != nil {
		w.err = fmt.Errorf("record: flush: %w", err)
	}
	return w.err
}

func (h *Header) check() error {
	if h.Version != 0 && h.Version != Version {
		return fmt.Errorf("version %d: %w (this package writes version %d)", h.Version, ErrVersion, Version)
	}
	if h.Start.IsZero() {
		return fmt.Errorf("start time missing: %w", ErrInvalid)
	}
	if y := h.Start.Year(); y < 0 || y > 9999 {
		return fmt.Errorf("start time %v is outside RFC 3339's years 0000-9999: %w", h.Start, ErrInvalid)
	}
	for _, k := range slices.Sorted(maps.Keys(h.Meta)) { // the same key reported every time
		if k == keyStart {
			return fmt.Errorf("metadata key %q is reserved for the start time: %w", k, ErrInvalid)
		}
		if !validKey(k) {
			return fmt.Errorf("metadata key %q: want a letter, then letters, digits, '_', '.' or '-': %w", k, ErrInvalid)
		}
	}
	return nil
}

// appendValue writes v bare when that reads back unchanged, else quoted.
func appendValue(b []byte, v string) []byte {
	bare := v != ""
	for _, r := range v {
		if r == '"' || r == ' ' || r == utf8.RuneError || !unicode.IsPrint(r) {
			bare = false
			break
		}
	}
	if bare {
		return append(b, v...)
	}
	return strconv.AppendQuote(b, v)
}

func appendSWR(b []byte, v float64) []byte {
	switch {
	case math.IsNaN(v):
		return append(b, "nan"...)
	case math.IsInf(v, 1):
		return append(b, "inf"...)
	}
	return strconv.AppendFloat(b, v, 'g', -1, 64)
}

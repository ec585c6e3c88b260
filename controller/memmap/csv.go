package memmap

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
)

// csvColumns returns the header row of the CSV exchange format.
func csvColumns() [6]string {
	return [6]string{"frequency_hz", "position", "time", "temperature_c", "swr", "q"}
}

// maxCSVErrors is how many bad rows ImportCSV reports before it stops reading.
const maxCSVErrors = 20

// ExportCSV writes the learned points, sorted by frequency, as CSV: the header row
// frequency_hz,position,time,temperature_c,swr,q, then one point per row, with RFC 3339 times
// in UTC and empty cells for unknown values. The drift estimate is not part of it: CSV is for
// people and spreadsheets; the map file is for the daemon.
func (m *Map) ExportCSV(w io.Writer) error {
	csvHeader := csvColumns()
	cw := csv.NewWriter(w)
	if err := cw.Write(csvHeader[:]); err != nil {
		return fmt.Errorf("memmap: export csv: %w", err)
	}
	row := make([]string, len(csvHeader))
	var b []byte
	for _, p := range m.Points() {
		row[0] = string(appendHz(b[:0], p.Freq))
		row[1] = strconv.FormatInt(p.Pos, 10)
		row[2] = ""
		if !p.At.IsZero() {
			row[2] = string(appendTime(b[:0], p.At))
		}
		row[3] = ""
		if p.HasTemp {
			row[3] = string(appendCelsius(b[:0], p.Temp))
		}
		row[4], row[5] = "", ""
		if p.SWR != 0 {
			row[4] = string(appendFloat(b[:0], p.SWR))
		}
		if p.Q != 0 {
			row[5] = string(appendFloat(b[:0], p.Q))
		}
		if err := cw.Write(row); err != nil {
			return fmt.Errorf("memmap: export csv: %w", err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("memmap: export csv: %w", err)
	}
	return nil
}

// ImportCSV reads points in the format ExportCSV writes. Every bad row is reported with its
// line number (up to a limit), and then no points are returned: a half-imported map is worse
// than none. Value errors wrap ErrInvalidPoint. The points are returned in file order; learn them
// in time order (Map.Learn) to rebuild a map.
func ImportCSV(r io.Reader) ([]Point, error) {
	csvHeader := csvColumns()
	cr := csv.NewReader(r)
	cr.FieldsPerRecord = len(csvHeader)
	cr.TrimLeadingSpace = true
	cr.ReuseRecord = true
	head, err := cr.Read()
	switch {
	case errors.Is(err, io.EOF):
		return nil, errors.New("memmap: import csv: empty input, want a header row")
	case err != nil:
		return nil, fmt.Errorf("memmap: import csv: %w", err)
	}
	if len(head) > 0 {
		head[0] = strings.TrimPrefix(head[0], "\uFEFF")
	}
	for i, h := range head {
		if strings.TrimSpace(h) != csvHeader[i] {
			return nil, fmt.Errorf("memmap: import csv: line 1: header must be %s",
				strings.Join(csvHeader[:], ","))
		}
	}
	var pts []Point
	var errs []error
	for len(errs) < maxCSVErrors {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			var pe *csv.ParseError
			if errors.As(err, &pe) && errors.Is(pe.Err, csv.ErrFieldCount) {
				errs = append(errs, fmt.Errorf("line %d: want %d cells, got %d", pe.StartLine, len(csvHeader), len(rec)))
				continue
			}
			// A syntax error (a stray quote) leaves the reader lost: stop there.
			errs = append(errs, err)
			break
		}
		line, _ := cr.FieldPos(0)
		p, err := parseCSVRow(rec)
		if err != nil {
			errs = append(errs, fmt.Errorf("line %d: %w", line, err))
			continue
		}
		pts = append(pts, p)
	}
	if len(errs) > 0 {
		if len(errs) == maxCSVErrors {
			errs = append(errs, errors.New("too many bad rows, stopped reading"))
		}
		return nil, fmt.Errorf("memmap: import csv: %w", errors.Join(errs...))
	}
	return pts, nil
}

// parseCSVRow parses one data row's cells.
func parseCSVRow(rec []string) (Point, error) {
	csvHeader := csvColumns()
	var p Point
	var err error
	cell := func(i int) string { return strings.TrimSpace(rec[i]) }
	if p.Freq, err = parseHz(cell(0)); err != nil {
		return Point{}, fmt.Errorf("%s %q: %w", csvHeader[0], cell(0), err)
	}
	if p.Pos, err = strconv.ParseInt(cell(1), 10, 64); err != nil {
		return Point{}, fmt.Errorf("%s %q: not an integer", csvHeader[1], cell(1))
	}
	if s := cell(2); s != "" {
		if p.At, err = parseTime(s); err != nil {
			return Point{}, fmt.Errorf("%s %q: %w", csvHeader[2], s, err)
		}
	}
	if s := cell(3); s != "" {
		if p.Temp, err = parseCelsius(s); err != nil {
			return Point{}, fmt.Errorf("%s %q: %w", csvHeader[3], s, err)
		}
		p.HasTemp = true
	}
	if s := cell(4); s != "" {
		if p.SWR, err = parseFinite(s); err != nil {
			return Point{}, fmt.Errorf("%s %q: %w", csvHeader[4], s, err)
		}
		if p.SWR == 0 {
			return Point{}, fmt.Errorf("%w: %s 0: leave the cell empty if unknown", ErrInvalidPoint, csvHeader[4])
		}
	}
	if s := cell(5); s != "" {
		if p.Q, err = parseFinite(s); err != nil {
			return Point{}, fmt.Errorf("%s %q: %w", csvHeader[5], s, err)
		}
	}
	if err := p.validate(); err != nil {
		return Point{}, err
	}
	return p.normalized(), nil
}

package sweeps

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
)

// An ID names one recording: the UTC second its operation started and a number, the request's
// ID unless another recording of the same second has it already (a restart within the second
// begins counting requests again): 20260102T150405Z-000123. The number has at least six digits
// and no leading zeros beyond them, so that every ID has one spelling; IDs of recordings that
// started in different seconds sort as their text does. Only ASCII letters, digits and '-' occur
// in one, so it is safe in a URL path and a file name.
const (
	idTime   = "20060102T150405Z"
	idDigits = 6
	// fileSuffix ends the name of every recording's file: <id>.sweep.
	fileSuffix = ".sweep"
	// tempInfix marks the temporary file a recording is written to before it is renamed into
	// place: .<id>.sweep.tmp-<random>. The leading dot keeps it out of a casual listing.
	tempInfix = fileSuffix + ".tmp-"
)

// ErrInvalidID: the text is not a recording's ID (it may be a path, or anything else). Nothing
// by that name is looked for.
var ErrInvalidID = errors.New("not a recording id")

// id is a parsed ID. IDs order by when, then n.
type id struct {
	when time.Time // UTC, whole seconds
	n    uint64
}

func newID(start time.Time, n uint64) id {
	return id{when: start.UTC().Truncate(time.Second), n: n}
}

func (i id) String() string {
	return fmt.Sprintf("%s-%0*d", i.when.Format(idTime), idDigits, i.n)
}

func (i id) less(j id) bool {
	if !i.when.Equal(j.when) {
		return i.when.Before(j.when)
	}
	return i.n < j.n
}

func (i id) compare(j id) int {
	switch {
	case i.less(j):
		return -1
	case j.less(i):
		return 1
	}
	return 0
}

// parseID parses the text of an ID. It accepts only the one spelling String gives, so that no
// two texts name the same recording and no text names a path.
func parseID(s string) (id, error) {
	ts, num, ok := strings.Cut(s, "-")
	if !ok || len(ts) != len(idTime) || len(num) < idDigits || len(num) > 20 {
		return id{}, fmt.Errorf("%q: %w", s, ErrInvalidID)
	}
	for i := 0; i < len(num); i++ {
		if num[i] < '0' || num[i] > '9' {
			return id{}, fmt.Errorf("%q: %w", s, ErrInvalidID)
		}
	}
	when, err := time.Parse(idTime, ts)
	if err != nil {
		return id{}, fmt.Errorf("%q: %w", s, ErrInvalidID)
	}
	n, err := strconv.ParseUint(num, 10, 64)
	if err != nil {
		return id{}, fmt.Errorf("%q: %w", s, ErrInvalidID)
	}
	i := id{when: when, n: n}
	if i.String() != s {
		return id{}, fmt.Errorf("%q: %w", s, ErrInvalidID)
	}
	return i, nil
}

// fileName is the name of the file that holds recording i.
func (i id) fileName() string { return i.String() + fileSuffix }

// nameKind says what a directory entry's name makes it.
type nameKind int

const (
	foreignName   nameKind = iota // not ours: never touched
	recordingName                 // <id>.sweep
	tempName                      // .<id>.sweep.tmp-…: a write killed midway
)

// classify says what name is, and for a recording its ID.
func classify(name string) (nameKind, id) {
	if base, ok := strings.CutSuffix(name, fileSuffix); ok {
		if i, err := parseID(base); err == nil {
			return recordingName, i
		}
		return foreignName, id{}
	}
	if rest, ok := strings.CutPrefix(name, "."); ok {
		if base, tail, ok := strings.Cut(rest, tempInfix); ok && tail != "" {
			if i, err := parseID(base); err == nil {
				return tempName, i
			}
		}
	}
	return foreignName, id{}
}

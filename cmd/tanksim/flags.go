package main

import (
	"errors"
	"flag"
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/tankd/tankd/controller/station"
)

// numFlags declares a command's numeric flags, each with its accepted range. Parsing only reads
// the numbers; check then reports every flag given outside its range, all at once, so that NaN,
// the infinities and absurd values stop at the command line with the range they missed.
type numFlags struct {
	fs    *flag.FlagSet
	vals  []*numValue
	lists []*frequencyList
}

func newNumFlags(fs *flag.FlagSet) *numFlags { return &numFlags{fs: fs} }

// numValue is one numeric flag: exactly one of f, i and u is set.
type numValue struct {
	name  string
	r     station.Range
	f     *float64
	i     *int
	u     *uint64
	given bool
}

// String implements flag.Value. The flag package calls it on a zero numValue too, to learn
// which default is not worth showing: 0, the default of the flags that leave a key as the
// station description has it.
func (v *numValue) String() string {
	switch {
	case v == nil:
		return "0"
	case v.f != nil:
		return strconv.FormatFloat(*v.f, 'g', -1, 64)
	case v.i != nil:
		return strconv.Itoa(*v.i)
	case v.u != nil:
		return strconv.FormatUint(*v.u, 10)
	}
	return "0"
}

// Set implements flag.Value: it reads the number and leaves its range to check.
func (v *numValue) Set(s string) error {
	v.given = true
	switch {
	case v.f != nil:
		x, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return fmt.Errorf("want a number, %s", v.r)
		}
		*v.f = x
	case v.i != nil:
		x, err := strconv.ParseInt(s, 0, strconv.IntSize)
		if err != nil {
			return fmt.Errorf("want a whole number, %s", v.r)
		}
		*v.i = int(x)
	case v.u != nil:
		x, err := strconv.ParseUint(s, 0, 64)
		if err != nil {
			return fmt.Errorf("want a whole number, %s", seedRange)
		}
		*v.u = x
	}
	return nil
}

func (v *numValue) number() float64 {
	switch {
	case v.f != nil:
		return *v.f
	case v.i != nil:
		return float64(*v.i)
	}
	return float64(*v.u)
}

// seedRange is every seed, in words: station.Range would write its top in exponent form.
const seedRange = "0 to 18446744073709551615"

// usageWithRange appends the range to the flag's help; the unit, or the word the description
// marks with backquotes, is what the help shows after the flag's name.
func usageWithRange(usage string, r station.Range) string {
	rng := r.String()
	if r.Max == math.MaxUint64 {
		rng = seedRange
	}
	if r.Unit != "" && !strings.Contains(usage, "`") {
		rng = strings.Replace(rng, " "+r.Unit, " `"+r.Unit+"`", 1)
	}
	return usage + ", " + rng
}

func (n *numFlags) add(v *numValue, usage string) {
	n.vals = append(n.vals, v)
	n.fs.Var(v, v.name, usageWithRange(usage, v.r))
}

// Float declares a float flag.
func (n *numFlags) Float(name string, def float64, r station.Range, usage string) *float64 {
	p := new(float64)
	*p = def
	n.add(&numValue{name: name, r: r, f: p}, usage)
	return p
}

// Int declares an integer flag.
func (n *numFlags) Int(name string, def int, r station.Range, usage string) *int {
	p := new(int)
	*p = def
	n.add(&numValue{name: name, r: r, i: p}, usage)
	return p
}

// Seed declares a seed flag: every 64-bit number is a seed.
func (n *numFlags) Seed(name string, def uint64, usage string) *uint64 {
	p := new(uint64)
	*p = def
	n.add(&numValue{name: name, r: station.Range{Min: 0, Max: math.MaxUint64}, u: p}, usage)
	return p
}

// Frequencies declares a flag of comma-separated frequencies, each in sim.FrequencyRange.
func (n *numFlags) Frequencies(name, usage string) *frequencyList {
	l := &frequencyList{name: name}
	n.lists = append(n.lists, l)
	n.fs.Var(l, name, usage)
	return l
}

// check reports every flag given outside its range, as a usage error.
func (n *numFlags) check() error {
	var errs []error
	for _, v := range n.vals {
		if !v.given {
			continue
		}
		if err := v.r.Check(v.number()); err != nil {
			errs = append(errs, fmt.Errorf("-%s %w", v.name, err))
		}
	}
	for _, l := range n.lists {
		for _, f := range l.freqs {
			if err := station.FrequencyRange().Check(f); err != nil {
				errs = append(errs, fmt.Errorf("-%s %w", l.name, err))
			}
		}
	}
	if err := errors.Join(errs...); err != nil {
		return usageError{err}
	}
	return nil
}

// parse parses the command line, then checks every numeric flag given against its range.
func (n *numFlags) parse(args []string) error {
	if err := parseFlags(n.fs, args); err != nil {
		return err
	}
	return n.check()
}

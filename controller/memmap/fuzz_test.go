package memmap

import (
	"bytes"
	"fmt"
	"testing"
)

func FuzzLoadMapFile(f *testing.F) {
	m := sessionMap(f, 3, 4)
	f.Add(m.encode())
	f.Add(mustNewEmpty(f).encode())
	f.Add([]byte("tankd-tunemap 1\n"))
	f.Add([]byte("tankd-tunemap 1\ndrift at=- x=0,0,0,0,0 p=0,0,0,0,0,0,0,0,0,0,0,0,0,0,0 tref=- trec=-\npoints 0\n"))
	f.Add([]byte("tankd-tunemap 2\ndrift at=- x=0,0,0,0,0 p=0,0,0,0,0,0,0,0,0,0,0,0,0,0,0 tref=- trec=-\n" +
		"calib shape=1,0.5 eps=0,0 off=0,0 noise=0.25,2 prior=0,0\npoints 0\n"))
	o, _ := Options{}.resolve()
	current := []byte(fmt.Sprintf("%s %d\n", fileMagic, fileVersion))
	f.Fuzz(func(t *testing.T, data []byte) {
		// The whole file: must never panic, and what loads in the current version must save
		// to the same bytes (an older version saves as the current one).
		if m, err := decode(data, o); err == nil && bytes.HasPrefix(data, current) {
			if again := m.encode(); !bytes.Equal(again, data) {
				t.Fatalf("a loaded file re-encodes differently:\n%s\n%s", data, again)
			}
		}
		// The body past the checksum, which random input rarely gets to.
		m, err := parseBody(data, o)
		if err != nil {
			return
		}
		body, err := verify(m.encode())
		if err != nil {
			t.Fatal(err)
		}
		m2, err := parseBody(body, o)
		if err != nil {
			t.Fatalf("re-parse: %v", err)
		}
		if !bytes.Equal(m2.encode(), m.encode()) {
			t.Fatal("parse, encode, parse is not stable")
		}
	})
}

func mustNewEmpty(t testing.TB) *Map { return mustNew(t, Options{}) }

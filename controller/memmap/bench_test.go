package memmap

import (
	"testing"

	"periph.io/x/conn/v3/physic"
)

func benchMap(b *testing.B, n int) *Map {
	s := newSession(1, linearCap{})
	m := mustNew(b, Options{})
	for m.Len() < n {
		pt, _ := s.tune(s.nextTune())
		m.Learn(pt)
	}
	return m
}

func BenchmarkPredict(b *testing.B) {
	m := benchMap(b, 100)
	temp := celsius(15)
	at := m.Drift().At
	b.ReportAllocs()
	for b.Loop() {
		m.Predict(7050*physic.KiloHertz, at, &temp)
	}
}

func BenchmarkLearn(b *testing.B) {
	m := benchMap(b, 200)
	s := newSession(2, linearCap{})
	s.skip(m.Drift().At.Sub(s.at))
	b.ReportAllocs()
	for b.Loop() {
		pt, _ := s.tune(s.nextTune())
		m.Learn(pt)
	}
}

func BenchmarkSave(b *testing.B) {
	m := benchMap(b, 200)
	path := b.TempDir() + "/tune.map"
	for b.Loop() {
		if err := m.Save(path); err != nil {
			b.Fatal(err)
		}
	}
}

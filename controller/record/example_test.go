package record_test

import (
	"fmt"
	"strings"

	"github.com/tankd/tankd/controller/record"
)

func ExampleReadAll() {
	const file = `tankd-sweep 1
# 80 m dip, coarse pass up then down
@ start=2026-01-01T00:00:00Z
@ loop="garden loop, two turns"
@ seed=42
@ source=tanksim
t_s step dir freq_hz fwd_w ref_w swr
0.001160 40210 + 3750000 4.9812 0.0021 1.0435718
0.002320 40211 + 3750000 4.9809 0.0019 1.0413037
`
	h, samples, err := record.ReadAll(strings.NewReader(file))
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(h.Start, h.Meta["loop"])
	for _, s := range samples {
		fmt.Println(s.T, s.Step, s.Dir, s.Freq, s.Forward, s.Reflected, s.SWR)
	}
	// Output:
	// 2026-01-01 00:00:00 +0000 UTC garden loop, two turns
	// 1.16ms 40210 + 3.750MHz 4.981W 2.100mW 1.0435718
	// 2.32ms 40211 + 3.750MHz 4.981W 1.900mW 1.0413037
}

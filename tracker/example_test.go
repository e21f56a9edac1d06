package tracker_test

import (
	"fmt"
	"math/rand/v2"

	"modewatch/tracker"
	"modewatch/tracker/modes"
)

// Fit a baseline on normal frames of a small unit (two flows and a level
// that move together, plus an independent temperature), then score a frame
// whose level sensor reads 8 % high.
func Example() {
	rng := rand.New(rand.NewPCG(1, 2))
	frame := func() []float64 {
		load := rng.NormFloat64()
		return []float64{
			50 + 5*load + 0.5*rng.NormFloat64(), // feed flow, m³/h
			48 + 5*load + 0.5*rng.NormFloat64(), // product flow, m³/h
			70 + 2*load + 0.2*rng.NormFloat64(), // level, %
			80 + rng.NormFloat64(),              // temperature, °C
		}
	}
	normal := make([][]float64, 2000)
	for k := range normal {
		normal[k] = frame()
	}
	tr, err := tracker.New(4, tracker.Config{Modes: modes.Config{Count: 1}})
	if err != nil {
		fmt.Println(err)
		return
	}
	if err := tr.Fit(normal); err != nil {
		fmt.Println(err)
		return
	}
	x := frame()
	x[2] += 8 // level sensor bias of 4 standard deviations
	var sc tracker.Score
	if err := tr.Step(&sc, x, nil); err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("state %s, φ over limit: %v\n", sc.State, sc.Phi > sc.PhiLimit)
	c := sc.Contrib[0]
	fmt.Printf("first contributor: channel %d, over its RBC limit: %v, in modes %v\n", c.Channel, c.RBC > c.RBCLimit, c.Modes)
	// Output:
	// state baseline, φ over limit: true
	// first contributor: channel 2, over its RBC limit: true, in modes [1]
}

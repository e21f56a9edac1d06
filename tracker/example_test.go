package tracker_test

import (
	"errors"
	"fmt"
	"math/rand/v2"
	"time"

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

// A checkpoint restores the whole tracker: the same frames then give
// bit-identical scores.
func ExampleTracker_MarshalBinary() {
	cfg := tracker.Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 50, Modes: modes.Config{Count: 1}}
	rng := rand.New(rand.NewPCG(3, 4))
	frames := make([][]float64, 120)
	for k := range frames {
		u := rng.NormFloat64()
		frames[k] = []float64{u + 0.1*rng.NormFloat64(), 2*u + 0.1*rng.NormFloat64(), rng.NormFloat64()}
	}
	a, _ := tracker.New(3, cfg)
	var sa, sb tracker.Score
	for _, x := range frames[:80] {
		a.Step(&sa, x, nil)
	}
	ck, err := a.MarshalBinary()
	if err != nil {
		fmt.Println(err)
		return
	}
	b, _ := tracker.New(3, cfg)
	if err := b.UnmarshalBinary(ck); err != nil {
		fmt.Println(err)
		return
	}
	same := true
	for _, x := range frames[80:] {
		a.Step(&sa, x, nil)
		b.Step(&sb, x, nil)
		same = same && sa.T2 == sb.T2 && sa.SPE == sb.SPE && sa.Phi == sb.Phi
	}
	fmt.Println("identical scores after restore:", same)
	err = b.UnmarshalBinary(ck[:len(ck)/2])
	fmt.Println("truncated checkpoint rejected:", errors.Is(err, tracker.ErrCheckpoint))
	// Output:
	// identical scores after restore: true
	// truncated checkpoint rejected: true
}

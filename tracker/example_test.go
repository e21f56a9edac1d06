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

// A unit's registry grows while it is monitored (auto-discovery found a
// third channel): Grow keeps what was learned on the first two, and the new
// channel is listed as warming until it has WarmUp frames and a refresh has
// taken it into the model.
func ExampleTracker_Grow() {
	rng := rand.New(rand.NewPCG(5, 6))
	cfg := tracker.Config{Period: time.Second, HalfLife: time.Hour, WarmUp: 100, RefreshEvery: 10,
		Modes: modes.Config{Count: 1}}
	tr, err := tracker.New(2, cfg)
	if err != nil {
		fmt.Println(err)
		return
	}
	var sc tracker.Score
	for k := 0; k < 200; k++ {
		load := rng.NormFloat64()
		tr.Step(&sc, []float64{10 + load + 0.1*rng.NormFloat64(), 20 + 2*load + 0.1*rng.NormFloat64()}, nil)
	}
	if err := tr.Grow(3, cfg); err != nil { // the Config New(3, cfg) would get
		fmt.Println(err)
		return
	}
	for k := 1; k <= 120; k++ {
		load := rng.NormFloat64()
		x := []float64{10 + load + 0.1*rng.NormFloat64(), 20 + 2*load + 0.1*rng.NormFloat64(), 5 - load + 0.1*rng.NormFloat64()}
		tr.Step(&sc, x, nil)
		if k == 1 || k == 120 {
			fmt.Printf("frame %d after Grow: channels %d, warming %v, ready %v\n", k, tr.P(), sc.Warming, sc.Ready)
		}
	}
	// Output:
	// frame 1 after Grow: channels 3, warming [2], ready true
	// frame 120 after Grow: channels 3, warming [], ready true
}

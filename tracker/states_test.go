package tracker

import (
	"math"
	"testing"
)

// TestStateKey: distinct values are their own states; with bands the key
// counts the edges at or below the value (hand derivation).
func TestStateKey(t *testing.T) {
	bands := []float64{0.5, 100}
	cases := []struct {
		v     float64
		bands []float64
		key   float64
		ok    bool
	}{
		{1, nil, 1, true},
		{0, nil, 0, true},
		{-3, bands, 0, true},
		{0.5, bands, 1, true},
		{99.9, bands, 1, true},
		{100, bands, 2, true},
		{math.NaN(), bands, 0, false},
	}
	for _, c := range cases {
		k, ok := StateKey(c.v, c.bands)
		if k != c.key || ok != c.ok {
			t.Errorf("StateKey(%v, %v) = %v, %v; want %v, %v", c.v, c.bands, k, ok, c.key, c.ok)
		}
	}
	if n := testing.AllocsPerRun(100, func() { StateKey(50, bands) }); n != 0 {
		t.Errorf("StateKey allocates %v per call", n)
	}
}

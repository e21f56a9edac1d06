package tracker

import (
	"math"
	"testing"
)

// The augmented frame is the frame followed by the L before it, lagged
// values missing before L frames were seen and where the channel was
// missing then (the stacking of Ku, Storer & Georgakis 1995, derived by
// hand); Augment allocates nothing.
func TestLaggedAugment(t *testing.T) {
	const p, lags = 3, 2
	l, err := NewLagged(p, lags)
	if err != nil {
		t.Fatal(err)
	}
	if l.Width() != 9 {
		t.Fatalf("width %d, want 9", l.Width())
	}
	frames := [][]float64{{1, 2, 3}, {4, 5, 6}, {7, 8, 9}, {10, 11, 12}, {13, 14, 15}}
	miss := [][]bool{nil, {false, true, false}, nil, nil, nil}
	dst := make([]float64, 9)
	dm := make([]bool, 9)
	nan := math.NaN()
	want := [][]float64{
		{1, 2, 3, nan, nan, nan, nan, nan, nan},
		{4, nan, 6, 1, 2, 3, nan, nan, nan},
		{7, 8, 9, 4, nan, 6, 1, 2, 3},
		{10, 11, 12, 7, 8, 9, 4, nan, 6},
		{13, 14, 15, 10, 11, 12, 7, 8, 9},
	}
	for k, x := range frames {
		l.Augment(dst, dm, x, miss[k])
		for j := range dst {
			w := want[k][j]
			if (math.IsNaN(w) != math.IsNaN(dst[j])) || (!math.IsNaN(w) && w != dst[j]) || dm[j] != math.IsNaN(w) {
				t.Fatalf("frame %d: augmented %v (missing %v), want %v", k, dst, dm, want[k])
			}
		}
		if got := l.Ready(); got != (k >= lags-1) {
			t.Errorf("frame %d: ready %v after it", k, got)
		}
	}
	if c, g := l.Pair(7); c != 1 || g != 2 {
		t.Errorf("column 7 is channel %d lag %d, want 1, 2", c, g)
	}
	if n := l.PairName([]string{"a", "b", "c"}, 7); n != "b[t-2]" {
		t.Errorf("column 7 named %q", n)
	}
	l.Reset()
	l.Augment(dst, dm, frames[0], nil)
	if !dm[3] || !dm[8] {
		t.Errorf("after Reset the lagged values should be missing: %v", dm)
	}
	x := frames[1]
	if a := testing.AllocsPerRun(100, func() { l.Augment(dst, dm, x, nil) }); a != 0 {
		t.Errorf("Augment allocates %v times per frame", a)
	}
	for _, c := range [][2]int{{0, 1}, {3, -1}, {3, MaxLags + 1}} {
		if _, err := NewLagged(c[0], c[1]); err == nil {
			t.Errorf("NewLagged(%d, %d) accepted", c[0], c[1])
		}
	}
}

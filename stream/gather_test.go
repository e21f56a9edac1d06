package stream

import (
	"fmt"
	"math"
	"testing"
	"time"
)

// TestFrameGather: a unit's channels in its own order, with a channel the
// frame misses, one the registry does not hold (-1) and one the frame does
// not reach yet (discovered after it); no allocation.
func TestFrameGather(t *testing.T) {
	f := &Frame{Start: time.Unix(0, 0), Values: []float64{1, math.NaN(), 3}, Missing: []bool{false, true, false}, Times: []int64{10, noTime, 30}}
	idx := []int{2, 1, -1, 0, 5}
	dst, miss, times := make([]float64, len(idx)), make([]bool, len(idx)), make([]int64, len(idx))
	if n := f.Gather(dst, miss, times, idx); n != 2 {
		t.Errorf("%d present, want 2", n)
	}
	if got, want := fmt.Sprint(dst, miss, times), fmt.Sprint([]float64{3, math.NaN(), math.NaN(), 1, math.NaN()},
		[]bool{false, true, true, false, true}, []int64{30, NoReading, NoReading, 10, NoReading}); got != want {
		t.Errorf("gathered %s, want %s", got, want)
	}
	if a := testing.AllocsPerRun(100, func() { f.Gather(dst, miss, times, idx) }); a != 0 {
		t.Errorf("%v allocations", a)
	}
}

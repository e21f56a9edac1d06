package stream

import "math"

// NoReading is the reading time [Frame.Gather] gives a channel without a
// value in the frame.
const NoReading int64 = noTime

// Gather copies the channels idx of f (registry indexes, in the caller's
// order; a negative index, or one the frame does not reach yet, is a
// channel without a value) into dst: the value, or NaN where missing. If
// miss is not nil it marks the missing ones; if times is not nil it gets
// each value's reading time (ns since the Unix epoch), or [NoReading]. dst,
// and miss and times when given, must be as long as idx. It returns how many
// channels have a value, and allocates nothing.
func (f *Frame) Gather(dst []float64, miss []bool, times []int64, idx []int) int {
	present := 0
	for k, i := range idx {
		ok := i >= 0 && i < len(f.Values) && !f.Missing[i]
		v, t := math.NaN(), NoReading
		if ok {
			v = f.Values[i]
			if i < len(f.Times) {
				t = f.Times[i]
			}
			present++
		}
		dst[k] = v
		if miss != nil {
			miss[k] = !ok
		}
		if times != nil {
			times[k] = t
		}
	}
	return present
}

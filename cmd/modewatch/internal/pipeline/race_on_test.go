//go:build race

package pipeline

// raceOn: the race detector instruments channel hand-overs, which then
// allocate; allocation counts of the worker pool are checked without it.
const raceOn = true

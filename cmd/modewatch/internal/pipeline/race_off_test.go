//go:build !race

package pipeline

const raceOn = false

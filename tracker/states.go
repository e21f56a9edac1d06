package tracker

import (
	"math"
	"sort"
)

// MaxStates bounds the operating states one unit keeps a model for: a
// state channel that takes more values (a live reading named by mistake)
// must not make a unit build models without bound.
const MaxStates = 8

// Scoring rules of found operating states (a Gaussian mixture's
// components): by the most probable component's model alone, or by the
// posterior-weighted combination of every component's model
// ([BIPRatio], Yu & Qin 2008). DefaultStateScoring was chosen on the
// realism suite run with every unit's states found (README, "Found
// states scored by their posterior", gives the figures).
const (
	StateScoringMostProbable = "most_probable"
	StateScoringPosterior    = "posterior"
	DefaultStateScoring      = StateScoringPosterior
)

// StateKey classifies value v of a unit's operating-state channel: with no
// bands each distinct value is its own state (key v); with ascending band
// edges b₀ < b₁ < … the key is the band index, the number of edges at or
// below v (0 below b₀). ok is false for a missing (non-finite) value. It
// allocates nothing.
func StateKey(v float64, bands []float64) (key float64, ok bool) {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, false
	}
	if len(bands) == 0 {
		return v, true
	}
	return float64(sort.Search(len(bands), func(i int) bool { return bands[i] > v })), true
}

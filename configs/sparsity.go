package configs

import (
	"modewatch/tracker/modes"
)

// CheckSparsity checks the syntax of a sparsity setting with the parser of
// package modes: none|l0:K|l1:S|l0pen:G|l1pen:G|l1sqrt:G|logpen:G[,EPS]|exppen:G[,EPS].
// The ranges that depend on the number of channels (K ≤ p, S ≤ √p) are
// checked when a unit's model is built.
func CheckSparsity(s string) error {
	_, err := modes.ParseSparsity(s)
	return err
}

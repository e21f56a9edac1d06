package configs

import (
	"fmt"
	"strconv"
	"strings"
)

// CheckSparsity checks the syntax of a sparsity setting,
// none|l0:K|l1:S|l0pen:G|l1pen:G|logpen:G[,EPS]|exppen:G[,EPS]; the
// ranges that depend on the number of channels (K ≤ p, S ≤ √p) are checked
// when the model is built.
func CheckSparsity(s string) error {
	if s == "none" {
		return nil
	}
	method, arg, ok := strings.Cut(s, ":")
	if !ok {
		return fmt.Errorf("sparsity %q: want none|l0:K|l1:S|l0pen:G|l1pen:G|logpen:G[,EPS]|exppen:G[,EPS]", s)
	}
	switch method {
	case "l0":
		if k, err := strconv.Atoi(arg); err != nil || k < 1 {
			return fmt.Errorf("sparsity %q: K must be a whole number ≥ 1", s)
		}
	case "l1":
		if v, err := strconv.ParseFloat(arg, 64); err != nil || !(v >= 1) {
			return fmt.Errorf("sparsity %q: S must be a number ≥ 1", s)
		}
	case "l0pen", "l1pen", "l1pensqrt":
		if v, err := strconv.ParseFloat(arg, 64); err != nil || !(v >= 0) {
			return fmt.Errorf("sparsity %q: G must be a number ≥ 0", s)
		}
	case "logpen", "exppen":
		g, eps, hasEps := strings.Cut(arg, ",")
		if v, err := strconv.ParseFloat(g, 64); err != nil || !(v >= 0) {
			return fmt.Errorf("sparsity %q: G must be a number ≥ 0", s)
		}
		if hasEps {
			if v, err := strconv.ParseFloat(eps, 64); err != nil || !(v > 0) {
				return fmt.Errorf("sparsity %q: EPS must be a number > 0", s)
			}
		}
	default:
		return fmt.Errorf("sparsity %q: unknown method %q (want none, l0, l1, l0pen, l1pen, logpen or exppen)", s, method)
	}
	return nil
}

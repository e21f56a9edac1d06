package configs

import (
	"strings"
	"testing"
)

func TestParseStatistics(t *testing.T) {
	for _, c := range []struct {
		in   string
		want Statistics
		ok   bool
	}{
		{"t2,spe,phi", Statistics{T2: true, SPE: true, Phi: true}, true},
		{" RES , var", Statistics{Residual: true, Variance: true}, true},
		{"t2,spe,phi,res,mewma", Statistics{T2: true, SPE: true, Phi: true, Residual: true, Mewma: true}, true},
		{"", Statistics{}, false},
		{"t2,q", Statistics{}, false},
		{"t2,ewma", Statistics{}, false},
	} {
		got, err := ParseStatistics(c.in)
		if (err == nil) != c.ok || (c.ok && got != c.want) {
			t.Errorf("%q: %+v, %v", c.in, got, err)
		}
		if err != nil && !strings.Contains(err.Error(), "mewma") {
			t.Errorf("%q: error %q does not list the choices", c.in, err)
		}
	}
}

// model.mewma_lambda and a statistics list with mewma are checked at their
// keys, at the top level and per unit.
func TestMewmaValidation(t *testing.T) {
	for _, c := range []struct {
		yaml, want string
	}{
		{"model: {statistics: \"t2,spe,phi,res,mewma\", mewma_lambda: 0.1}\n", ""},
		{"model: {mewma_lambda: 0}\n", ""}, // default
		{"model: {mewma_lambda: 1.5}\n", "model.mewma_lambda"},
		{"model: {mewma_lambda: -0.1}\n", "model.mewma_lambda"},
		{"model: {mewma_lambda: 1}\n", "model.mewma_lambda"},
		{"model: {statistics: \"t2,mewmaa\"}\n", "model.statistics"},
		{"units: [{name: a, model: {mewma_lambda: 2}}]\n", "mewma_lambda"},
	} {
		checkKeyError(t, c.yaml, c.want)
	}
}

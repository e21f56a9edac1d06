package configs

import "testing"

func TestParseStatistics(t *testing.T) {
	for _, c := range []struct {
		in   string
		want Statistics
		ok   bool
	}{
		{"t2,spe,phi", Statistics{T2: true, SPE: true, Phi: true}, true},
		{" RES , var", Statistics{Residual: true, Variance: true}, true},
		{"", Statistics{}, false},
		{"t2,q", Statistics{}, false},
	} {
		got, err := ParseStatistics(c.in)
		if (err == nil) != c.ok || (c.ok && got != c.want) {
			t.Errorf("%q: %+v, %v", c.in, got, err)
		}
	}
}

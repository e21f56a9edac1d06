package modes

import (
	"errors"
	"math"
	"testing"
)

func TestParseSparsity(t *testing.T) {
	cases := []struct {
		in   string
		want Sparsity
		str  string
	}{
		{"none", Sparsity{}, "none"},
		{" NONE ", Sparsity{}, "none"},
		{"l0:5", Sparsity{Method: L0, K: 5}, "l0:5"},
		{"L0: 12", Sparsity{Method: L0, K: 12}, "l0:12"},
		{"l1:2.5", Sparsity{Method: L1, S: 2.5}, "l1:2.5"},
		{"l1:1", Sparsity{Method: L1, S: 1}, "l1:1"},
		{"l0pen:0.3", Sparsity{Method: L0Pen, Gamma: 0.3}, "l0pen:0.3"},
		{"l0pen:0", Sparsity{Method: L0Pen}, "l0pen:0"},
		{"l1pen:1e-2", Sparsity{Method: L1Pen, Gamma: 0.01}, "l1pen:0.01"},
		{"l1sqrt:0.5", Sparsity{Method: L1PenSqrt, Gamma: 0.5}, "l1sqrt:0.5"},
		{"logpen:0.3", Sparsity{Method: LogPen, Gamma: 0.3, Eps: DefaultEps}, "logpen:0.3,0.1"},
		{"logpen:0.3,0.01", Sparsity{Method: LogPen, Gamma: 0.3, Eps: 0.01}, "logpen:0.3,0.01"},
		{"exppen:1.2, 0.05", Sparsity{Method: ExpPen, Gamma: 1.2, Eps: 0.05}, "exppen:1.2,0.05"},
		{"l1:" + "1.4142135623730951", Sparsity{Method: L1, S: math.Sqrt2}, "l1:1.4142135623730951"},
	}
	for _, c := range cases {
		got, err := ParseSparsity(c.in)
		if err != nil {
			t.Errorf("%q: %v", c.in, err)
			continue
		}
		if got != c.want {
			t.Errorf("%q: %+v, want %+v", c.in, got, c.want)
		}
		if s := got.String(); s != c.str {
			t.Errorf("%q: String() = %q, want %q", c.in, s, c.str)
		}
		back, err := ParseSparsity(got.String())
		if err != nil || back != got {
			t.Errorf("%q: round trip gave %+v, %v", c.in, back, err)
		}
	}
	for _, in := range []string{"", "dense", "l0", "l0:", "l0:2.5", "l0:0", "l0:-3", "l1:0.5", "l1:x",
		"l0pen:-1", "l1pen:NaN", "l1sqrt:Inf", "logpen:0.1,0", "logpen:0.1,-1", "exppen:,0.1", "none:3", "l2:4"} {
		if _, err := ParseSparsity(in); !errors.Is(err, ErrSparsity) {
			t.Errorf("%q: error %v, want ErrSparsity", in, err)
		}
	}
}

// FuzzParseSparsity: anything that parses prints back to itself.
func FuzzParseSparsity(f *testing.F) {
	for _, s := range []string{"none", "l0:3", "l1:1.5", "l0pen:0.2", "l1pen:1", "l1sqrt:0.3", "logpen:0.3,0.1", "exppen:2"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		sp, err := ParseSparsity(s)
		if err != nil {
			return
		}
		back, err := ParseSparsity(sp.String())
		if err != nil || back != sp {
			t.Fatalf("%q → %+v → %q → %+v, %v", s, sp, sp.String(), back, err)
		}
	})
}

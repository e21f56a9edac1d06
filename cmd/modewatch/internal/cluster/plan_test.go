package cluster

import (
	"fmt"
	"maps"
	"slices"
	"testing"
)

func names(prefix string, n int) []string {
	out := make([]string, n)
	for i := range out {
		out[i] = fmt.Sprintf("%s%02d", prefix, i)
	}
	return out
}

func loads(plan map[string]string) map[string]int {
	l := map[string]int{}
	for _, o := range plan {
		l[o]++
	}
	return l
}

// TestPlanBalance: the bound of issue 16, 24 units over 3 instances give
// each 8 ± 1 (the quota rule gives exactly 8), and uneven counts give ⌊N/M⌋
// or ⌈N/M⌉.
func TestPlanBalance(t *testing.T) {
	for _, c := range []struct{ units, insts int }{{24, 3}, {25, 3}, {10, 4}, {7, 7}, {3, 5}, {100, 6}} {
		t.Run(fmt.Sprintf("%d/%d", c.units, c.insts), func(t *testing.T) {
			us, is := names("unit", c.units), names("inst", c.insts)
			p := Plan(us, is, nil, nil)
			if len(p) != c.units {
				t.Fatalf("%d units placed, want %d", len(p), c.units)
			}
			q := c.units / c.insts
			for _, i := range is {
				if n := loads(p)[i]; n < q || n > q+1 {
					t.Errorf("%s holds %d units, want %d or %d", i, n, q, q+1)
				}
			}
			if c.units == 24 && c.insts == 3 {
				for _, i := range is {
					if n := loads(p)[i]; n < 7 || n > 9 {
						t.Errorf("%s holds %d of 24 units, want 8 ± 1", i, n)
					}
				}
			}
		})
	}
}

// TestPlanLeave: after one of 3 instances leaves, every unit that was on a
// survivor stays there, the departed instance's units are spread over the
// survivors, and the survivors are balanced (12 each).
func TestPlanLeave(t *testing.T) {
	us, is := names("unit", 24), names("inst", 3)
	before := Plan(us, is, nil, nil)
	for _, gone := range is {
		left := slices.DeleteFunc(slices.Clone(is), func(s string) bool { return s == gone })
		after := Plan(us, left, before, nil)
		for u, o := range before {
			if o != gone && after[u] != o {
				t.Errorf("%s left: unit %s moved from survivor %s to %s", gone, u, o, after[u])
			}
			if after[u] == gone || after[u] == "" {
				t.Errorf("%s left: unit %s placed on %q", gone, u, after[u])
			}
		}
		for _, i := range left {
			if n := loads(after)[i]; n != 12 {
				t.Errorf("%s left: %s holds %d units, want 12", gone, i, n)
			}
		}
	}
}

// TestPlanJoin: when a 4th instance joins, only the units the quotas force
// out move, all of them to the newcomer: 24 → 6 each, 6 moves.
func TestPlanJoin(t *testing.T) {
	us, is := names("unit", 24), names("inst", 3)
	before := Plan(us, is, nil, nil)
	after := Plan(us, append(slices.Clone(is), "inst99"), before, nil)
	moved := 0
	for u, o := range before {
		if after[u] != o {
			moved++
			if after[u] != "inst99" {
				t.Errorf("unit %s moved from %s to %s, not to the newcomer", u, o, after[u])
			}
		}
	}
	if moved != 6 {
		t.Errorf("%d units moved, want 6 (the fewest for 6 each)", moved)
	}
	for i, n := range loads(after) {
		if n != 6 {
			t.Errorf("%s holds %d units, want 6", i, n)
		}
	}
}

// TestPlanPins: a pinned unit goes to its live instance whatever the hash
// says, and to a live one when its instance is down.
func TestPlanPins(t *testing.T) {
	us, is := names("unit", 12), names("inst", 3)
	free := Plan(us, is, nil, nil)
	pins := map[string]string{}
	for _, u := range us[:4] {
		for _, i := range is {
			if i != free[u] {
				pins[u] = i // somewhere the hash did not put it
				break
			}
		}
	}
	p := Plan(us, is, free, pins)
	for u, i := range pins {
		if p[u] != i {
			t.Errorf("pinned unit %s on %s, want %s", u, p[u], i)
		}
	}
	if len(p) != len(us) {
		t.Errorf("%d units placed, want %d", len(p), len(us))
	}
	down := Plan(us, is[1:], p, map[string]string{us[0]: is[0]})
	if o := down[us[0]]; o == "" || o == is[0] {
		t.Errorf("unit pinned to a down instance placed on %q", o)
	}
}

// TestPlanDeterministic: the order of the inputs does not change the plan,
// and a current owner that is not live is ignored.
func TestPlanDeterministic(t *testing.T) {
	us, is := names("unit", 30), names("inst", 4)
	cur := map[string]string{"unit03": "ghost", "unit04": "inst01"}
	want := Plan(us, is, cur, nil)
	rus, ris := slices.Clone(us), slices.Clone(is)
	slices.Reverse(rus)
	slices.Reverse(ris)
	if got := Plan(rus, ris, cur, nil); !maps.Equal(got, want) {
		t.Error("the plan depends on the order of units or instances")
	}
	if want["unit03"] == "ghost" {
		t.Error("a unit was left on an instance that is not live")
	}
	if want["unit04"] != "inst01" {
		t.Errorf("unit04 moved from its live owner within quota to %s", want["unit04"])
	}
	if len(Plan(us, nil, nil, nil)) != 0 {
		t.Error("units placed with no live instance")
	}
}

// TestRankSpread: without quotas, rendezvous ranking alone puts each of
// 3,000 units first on each of 3 instances about a third of the time
// (binomial σ ≈ 26; the bound is 5σ).
func TestRankSpread(t *testing.T) {
	is := names("inst", 3)
	first := map[string]int{}
	for _, u := range names("unit", 3000) {
		first[Rank(u, is)[0]]++
	}
	for _, i := range is {
		if n := first[i]; n < 1000-130 || n > 1000+130 {
			t.Errorf("%s ranked first for %d of 3000 units, want 1000 ± 130", i, n)
		}
	}
}

package tracker

import (
	"math/rand/v2"
	"slices"
	"testing"
	"time"
)

// TestRelationModes: on the invented plant with three planted linear
// relations (relationPlant: ch9 = ch0 + ch1, ch10 = ch3 − ch4,
// ch11 = ch6 + 0.5·ch7, each to noise sd 0.05 against sd 0.5 on the loose
// channels), three 3-sparse relation modes recover each relation's
// sensors exactly. Breaking relation 1 (+0.3 on ch9, 6 noise sd) raises
// the relation statistic over its limit in most frames and names that
// relation, while SPE with its limit at the same false-alert rate (the
// 99 % quantile over 5000 normal frames, as for the relation statistic)
// stays under it in most.
func TestRelationModes(t *testing.T) {
	rp := &relationPlant{rng: rand.New(rand.NewPCG(23, 1))}
	tr, err := New(12, Config{Period: time.Second, Relations: 3})
	if err != nil {
		t.Fatal(err)
	}
	frames := make([][]float64, 20000)
	for k := range frames {
		frames[k] = rp.frame(make([]float64, 12))
	}
	if err := tr.Fit(frames); err != nil {
		t.Fatal(err)
	}
	rel := tr.Relations()
	if len(rel) != 3 {
		t.Fatalf("%d relation modes, want 3", len(rel))
	}
	found := map[int]int{} // planted relation → relation mode
	for j, r := range rel {
		for k, want := range relations {
			if slices.Equal(r.Support, want) {
				found[k] = j
			}
		}
		t.Logf("relation mode %d: channels %v, loadings %.3f, variance %.2e", j, r.Support, r.Loadings, r.Variance)
	}
	if len(found) != 3 {
		t.Fatalf("recovered %d of the 3 planted relations", len(found))
	}
	const n = 5000
	var sc Score
	x := make([]float64, 12)
	speN, relN := make([]float64, n), make([]float64, n)
	for k := 0; k < n; k++ {
		if err := tr.Evaluate(&sc, rp.frame(x), nil); err != nil {
			t.Fatal(err)
		}
		speN[k], relN[k] = sc.SPE, sc.Relation
	}
	speLim, relLim := q99(speN), q99(relN)
	t.Logf("limits: relation χ² %.2f (99 %% quantile %.2f), SPE 99 %% quantile %.2f", sc.RelationLimit, relLim, speLim)
	over, named, overSPE := 0, 0, 0
	const m = 2000
	for k := 0; k < m; k++ {
		rp.frame(x)
		x[9] += 0.3
		if err := tr.Evaluate(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if sc.SPE > speLim {
			overSPE++
		}
		if sc.Relation > relLim {
			over++
			if sc.RelationMode == found[0] {
				named++
			}
		}
	}
	t.Logf("broken relation 1: relation statistic over in %d of %d frames (named %d), SPE over in %d", over, m, named, overSPE)
	if over < m*8/10 || named < over*95/100 {
		t.Errorf("relation statistic over its limit in %d of %d faulty frames, naming the broken relation in %d", over, m, named)
	}
	if overSPE > m/5 {
		t.Errorf("SPE over its limit in %d of %d faulty frames, want ≤ 20 %%", overSPE, m)
	}
}

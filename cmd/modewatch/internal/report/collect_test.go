package report

import (
	"bytes"
	"encoding/xml"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/tracker"
)

// TestCollectorBounded feeds a long series and checks that the buckets
// stay bounded, cover every frame, and keep the exact extremes: the
// largest and smallest value of the whole run, and each bucket's min and
// max equal to those of the frames it covers (counted by hand from the
// generating formula, seeded).
func TestCollectorBounded(t *testing.T) {
	const frames = 10_000
	c := NewCollector()
	c.MaxBuckets = 50
	rng := rand.New(rand.NewPCG(1, 2))
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	names := []string{"u.a", "u.b", "u.c"}
	vals := make([]float64, frames)
	var sc tracker.Score
	for k := 0; k < frames; k++ {
		sc.Ready = k >= 100 // warm-up: counted, not charted
		v := rng.ExpFloat64()
		vals[k] = v
		sc.T2, sc.T2Limit = v, 3
		sc.SPE, sc.SPELimit = 2*v, 6
		sc.Phi, sc.PhiLimit = v+1, 4
		sc.Contrib = sc.Contrib[:0]
		if k == 5000 {
			sc.Contrib = append(sc.Contrib, tracker.Contribution{Channel: 2, RBC: 12, RBCLimit: 4})
		}
		c.add("u", t0.Add(time.Duration(k)*10*time.Second), &sc, [nStats]float64{1, 1, 1}, len(names), func() []string { return names })
	}
	s := c.byName["u"]
	if s.frames != frames {
		t.Fatalf("frames %d, want %d", s.frames, frames)
	}
	if len(s.buckets) > 2*c.MaxBuckets || len(s.buckets) < c.MaxBuckets {
		t.Errorf("%d buckets, want between %d and %d", len(s.buckets), c.MaxBuckets, 2*c.MaxBuckets)
	}
	if s.per&(s.per-1) != 0 {
		t.Errorf("frames per bucket %d is not a power of two", s.per)
	}
	n := 0
	k := 100
	wantMax := math.Inf(-1)
	for i, b := range s.buckets {
		n += b.n
		lo, hi := math.Inf(1), math.Inf(-1)
		over := 0
		for j := k; j < k+b.n; j++ {
			lo, hi = math.Min(lo, vals[j]), math.Max(hi, vals[j])
			if vals[j] > 3 {
				over++
			}
		}
		if b.min[StatT2] != lo || b.max[StatT2] != hi || b.max[StatSPE] != 2*hi || b.min[StatPhi] != lo+1 || b.over[StatT2] != over {
			t.Fatalf("bucket %d (frames %d..%d): min %v max %v over %d, want %v %v %d", i, k, k+b.n-1, b.min[StatT2], b.max[StatT2], b.over[StatT2], lo, hi, over)
		}
		if got := time.Unix(0, b.from).Sub(t0) / (10 * time.Second); int(got) != k {
			t.Fatalf("bucket %d starts at frame %d, want %d", i, got, k)
		}
		wantMax = math.Max(wantMax, hi)
		k += b.n
	}
	if n != frames-100 {
		t.Errorf("buckets cover %d frames, want %d", n, frames-100)
	}
	// The one contribution (ratio 12/4 = 3) survives every merge.
	peak := float32(0)
	for i := 2; i < len(s.contrib); i += 3 {
		peak = max(peak, s.contrib[i])
	}
	if peak != 3 {
		t.Errorf("contribution peak %v, want 3", peak)
	}
	for _, st := range []int{StatT2, StatSPE, StatPhi} {
		b, err := statChart(s, st, []span{{from: 1, to: 2}}, nil)
		if err != nil || len(b) == 0 {
			t.Fatalf("chart %d: %v", st, err)
		}
		mustParseSVG(t, b)
	}
	b, top, err := contribChart(s, 240)
	if err != nil || len(top) != 1 || top[0] != "c" {
		t.Fatalf("heat map: top %v, %v", top, err)
	}
	mustParseSVG(t, b)
}

// mustParseSVG checks that b is well-formed XML with an svg root element.
func mustParseSVG(t *testing.T, b []byte) {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(b))
	root := ""
	for {
		tok, err := d.Token()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatalf("SVG is not well-formed XML: %v", err)
		}
		if se, ok := tok.(xml.StartElement); ok && root == "" {
			root = se.Name.Local
		}
	}
	if root != "svg" {
		t.Fatalf("root element %q, want svg", root)
	}
}

// TestCollectorAllocs guards the per-frame path: once the buckets have
// been halved, recording a frame allocates nothing.
func TestCollectorAllocs(t *testing.T) {
	c := NewCollector()
	c.MaxBuckets = 20
	names := []string{"u.a", "u.b"}
	nf := func() []string { return names }
	sc := tracker.Score{Ready: true, T2: 1, T2Limit: 2, SPE: 1, SPELimit: 2, Phi: 1, PhiLimit: 2,
		Contrib: []tracker.Contribution{{Channel: 1, RBC: 1, RBCLimit: 2}}}
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	k := 0
	step := func() {
		c.add("u", t0.Add(time.Duration(k)*time.Second), &sc, [nStats]float64{1, 1, 1}, 2, nf)
		k++
	}
	for i := 0; i < 200; i++ {
		step()
	}
	if a := testing.AllocsPerRun(5000, step); a != 0 {
		t.Errorf("%v allocations per frame, want 0", a)
	}
}

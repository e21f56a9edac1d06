package tracker

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/modes"
)

// persistRef forms D of the persistence weight (persist) for the smoothed
// frame zbar directly from its definition, with gonum's Cholesky inverse
// of A + εI (refPrecision) (A the model's correlation at the refresh the weight reads): Ω
// = (A + εI)⁻¹, sᵢ² = (Ωz̄)ᵢ²/Ωᵢᵢ, D² = max sᵢ²/ℓᵢ over the channels in
// the model whose level has at least start evaluations behind it.
func persistRef(t *testing.T, a mat.Symmetric, ridge float64, include []bool, zbar, lvl, lvlW []float64, start float64) float64 {
	t.Helper()
	p := a.SymmetricDim()
	as := mat.NewSymDense(p, nil)
	as.CopySym(a)
	om, _ := refPrecision(t, as, ridge)
	v := mat.NewVecDense(p, nil)
	v.MulVec(om, mat.NewVecDense(p, slices.Clone(zbar)))
	d := 0.0
	for i := 0; i < p; i++ {
		if !include[i] || lvlW[i] < start {
			continue
		}
		s2 := v.AtVec(i) * v.AtVec(i) / om.At(i, i)
		d = math.Max(d, s2/lvl[i])
	}
	return math.Sqrt(d)
}

// TestPersistEveryFrameSmallUnit: up to persistWidth channels the weight
// is formed at every learned frame under the factor of the model that
// scores the frame. On the six-channel unit of
// TestPersistSlowDriftNotAbsorbed (fitted, then a slow drift of the tight
// relation so that the weight falls below 1), every learned frame is one
// evaluation, and each frame's D equals the one formed from its
// definition with gonum's Cholesky inverse of A + ε_R·I (persistRef), to
// 10⁻⁹ relative (two solves with a factor against an explicit inverse:
// rounding only).
func TestPersistEveryFrameSmallUnit(t *testing.T) {
	if e := persistInterval(relP); e != 1 {
		t.Fatalf("persistInterval(%d) = %d, want 1", relP, e)
	}
	for _, p := range []int{19, 60, persistWidth} { // the suite's unit widths
		if e := persistInterval(p); e != 1 {
			t.Errorf("persistInterval(%d) = %d, want 1", p, e)
		}
	}
	cfg := relConfig(3)
	ck, _ := fittedRel(t, cfg, 21, 2000)
	tr, err := New(relP, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := tr.UnmarshalBinary(ck); err != nil {
		t.Fatal(err)
	}
	ps := tr.ps
	src := newRelPlant(1021)
	var sc Score
	x := make([]float64, relP)
	lvl, lvlW := make([]float64, relP), make([]float64, relP)
	const n = 1500
	below, compared := 0, 0
	for k := 0; k < n; k++ {
		src.frame(x)
		x[0] += 0.1 * math.Min(float64(k)/800, 1) // about 3 conditional standard deviations at the end
		a := mat.NewSymDense(relP, nil)
		a.CopySym(tr.mdl.a)
		include := slices.Clone(tr.mdl.include)
		copy(lvl, ps.lvl)
		copy(lvlW, ps.lvlW)
		ok := tr.rs.ok
		ev := ps.evals
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if !ok {
			continue
		}
		if ps.evals != ev+1 {
			t.Fatalf("frame %d: %d evaluations, want 1", k, ps.evals-ev)
		}
		want := persistRef(t, a, tr.cfg.ResidualRidge, include, ps.zbar, lvl, lvlW, ps.start())
		if math.Abs(ps.last-want) > 1e-9*math.Max(want, 1) {
			t.Fatalf("frame %d: D %v, from the definition %v", k, ps.last, want)
		}
		if w := scatterWeight(want, 3); math.Abs(ps.w-w) > 1e-9 {
			t.Fatalf("frame %d: weight %v, from the definition %v", k, ps.w, w)
		}
		compared++
		if ps.w < 1 {
			below++
		}
	}
	t.Logf("%d frames compared, %d with a weight below 1", compared, below)
	if compared < n-10 || below == 0 {
		t.Fatalf("%d frames compared, %d below 1: the test sees nothing", compared, below)
	}
}

// widePlant is a seeded invented unit of p channels driven by five
// independent slow factors (AR(1), time constant 100 frames) with sparse
// loadings, plus white measurement noise of 0.3.
type widePlant struct {
	rng  *rand.Rand
	load []float64
	f    [5]float64
}

func newWidePlant(p int, seed uint64) *widePlant {
	s := &widePlant{rng: rand.New(rand.NewPCG(seed, 77)), load: make([]float64, 5*p)}
	for i := range s.load {
		if s.rng.IntN(3) == 0 {
			s.load[i] = s.rng.NormFloat64()
		}
	}
	return s
}

func (s *widePlant) frame(x []float64) []float64 {
	a := math.Exp(-1.0 / 100)
	for j := range s.f {
		s.f[j] = a*s.f[j] + math.Sqrt(1-a*a)*s.rng.NormFloat64()
	}
	for i := range x {
		v := 0.3 * s.rng.NormFloat64()
		for j, f := range s.f {
			v += s.load[5*i+j] * f
		}
		x[i] = v
	}
	return x
}

// TestPersistWideUnitCostRule: above persistWidth channels the weight is
// formed every e = ⌈p/persistWidth⌉ learned frames (counted, not timed),
// so its two solves cost at most persistWidth·p multiply-adds per learned
// frame, and the factor it reads is copied (with Ω's diagonal formed for
// it) once every e refreshes; the frames between evaluations keep the
// last weight; and each evaluation's D equals the one formed from its
// definition (persistRef) under the model at the last copy, to 10⁻⁹
// relative: one model throughout, at most e refreshes old. No allocation
// per frame.
func TestPersistWideUnitCostRule(t *testing.T) {
	const p, n = 150, 3000
	e := persistInterval(p)
	if e != 3 {
		t.Fatalf("persistInterval(%d) = %d, want 3", p, e)
	}
	if e := persistInterval(500); e != 8 {
		t.Fatalf("persistInterval(500) = %d, want 8", e)
	}
	cfg := Config{Period: time.Second, WarmUp: 300, RefreshEvery: 32, Residual: true, FlatFrames: -1, Persist: 3,
		Modes: modes.Config{Count: 3}}
	tr, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	ps := tr.ps
	src := newWidePlant(p, 5)
	var sc Score
	x := make([]float64, p)
	lvl, lvlW := make([]float64, p), make([]float64, p)
	var aPin *mat.SymDense
	var incPin []bool
	learned, refreshes, checked, below := 0, 0, 0, 0
	lastW := 1.0
	for k := 0; k < n; k++ {
		src.frame(x)
		if k > 2000 {
			x[0] += 0.02 * float64(k-2000) / 100 // a slow drift, so the weight moves
		}
		a := mat.NewSymDense(p, nil)
		a.CopySym(tr.mdl.a)
		include := slices.Clone(tr.mdl.include)
		copy(lvl, ps.lvl)
		copy(lvlW, ps.lvlW)
		ok, ev, pins, nref := tr.rs != nil && tr.rs.ok, ps.evals, ps.pins, 0
		if ok {
			nref = tr.rs.nref
		}
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if tr.rs.nref > nref && ok {
			refreshes++
		}
		if !ok {
			continue
		}
		learned++
		if ps.pins > pins {
			aPin, incPin = a, include
			if ps.pinRef != nref {
				t.Fatalf("frame %d: copy of refresh %d, the current one is %d", k, ps.pinRef, nref)
			}
		}
		switch ps.evals - ev {
		case 0:
			if ps.w != lastW {
				t.Fatalf("frame %d: weight %v changed without an evaluation (was %v)", k, ps.w, lastW)
			}
			continue
		case 1:
		default:
			t.Fatalf("frame %d: %d evaluations", k, ps.evals-ev)
		}
		if nref-ps.pinRef >= e {
			t.Fatalf("frame %d: weight formed under the copy of refresh %d at refresh %d", k, ps.pinRef, nref)
		}
		inc := make([]bool, p)
		for i := range inc {
			inc[i] = include[i] && incPin[i]
		}
		want := persistRef(t, aPin, tr.cfg.ResidualRidge, inc, ps.zbar, lvl, lvlW, ps.start())
		if math.Abs(ps.last-want) > 1e-9*math.Max(want, 1) {
			t.Fatalf("frame %d: D %v, from the definition under the copied model %v", k, ps.last, want)
		}
		lastW = ps.w
		checked++
		if ps.w < 1 {
			below++
		}
	}
	t.Logf("%d learned frames, %d evaluations, %d refreshes, %d factor copies, %d weights below 1", learned, ps.evals, refreshes, ps.pins, below)
	if want := (learned + e - 1) / e; ps.evals != want {
		t.Errorf("%d evaluations over %d learned frames, want ⌈%d/%d⌉ = %d", ps.evals, learned, learned, e, want)
	}
	if work := float64(ps.evals) * p * p / float64(learned); work > persistWidth*p {
		t.Errorf("solves %.0f multiply-adds per learned frame, over persistWidth·p = %d", work, persistWidth*p)
	}
	if maxPins := (refreshes+e-1)/e + 1; ps.pins > maxPins || ps.pins < refreshes/e {
		t.Errorf("%d factor copies over %d refreshes, want about %d/%d", ps.pins, refreshes, refreshes, e)
	}
	if checked < 100 || below == 0 {
		t.Fatalf("%d evaluations checked, %d below 1: the test sees nothing", checked, below)
	}
	// The evaluations and the copies allocate nothing: 200 frames span
	// more than one copy (every e·RefreshEvery = 96 learned frames).
	pins := ps.pins
	if a := testing.AllocsPerRun(200, func() {
		if err := tr.Step(&sc, src.frame(x), nil); err != nil {
			t.Fatal(err)
		}
	}); a != 0 {
		t.Errorf("%v allocations per Step", a)
	}
	if ps.pins < pins+2 {
		t.Errorf("%d factor copies during the allocation check, want at least 2", ps.pins-pins)
	}
}

// TestPersistCheckpointFramesSince: versions 6 and 7 formed the weight every 4
// learned frames at any width, so its count of frames since the last
// evaluation (0–3) is read modulo persistInterval(p) (here 1: the next
// frame is evaluated); 4 or more is refused as before.
func TestPersistCheckpointFramesSince(t *testing.T) {
	cfg := relConfig(3)
	ck, _ := fittedRel(t, cfg, 3, 1200)
	tr, _ := New(relP, cfg)
	if err := tr.UnmarshalBinary(ck); err != nil {
		t.Fatal(err)
	}
	mb, err := tr.ms.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	at := len(ck) - 4 - len(mb) - 4 - 1 - 1 - 1 - 4 // the persist section's u32 frames since its evaluation, then the copy flag (0), the creep and level flags (0) and the modes
	if n, w := binary.LittleEndian.Uint32(ck[at:]), math.Float64frombits(binary.LittleEndian.Uint64(ck[at-8:])); n != 0 || w != tr.ps.w {
		t.Fatalf("at byte %d: frames %d, weight %v (want 0, %v): not the persist section", at, n, w, tr.ps.w)
	}
	for _, c := range []struct {
		n  uint32
		ok bool
	}{{3, true}, {4, false}} {
		b := bytes.Clone(ck[:len(ck)-4])
		binary.LittleEndian.PutUint32(b[at:], c.n)
		b = binary.LittleEndian.AppendUint32(b, crc32.ChecksumIEEE(b))
		nt, _ := New(relP, cfg)
		err := nt.UnmarshalBinary(b)
		if c.ok && (err != nil || nt.ps.n != 0) {
			t.Errorf("%d frames since the evaluation: error %v, count %d (want nil, 0)", c.n, err, nt.ps.n)
		}
		if !c.ok && !errors.Is(err, ErrCheckpoint) {
			t.Errorf("%d frames since the evaluation: want ErrCheckpoint, got %v", c.n, err)
		}
	}
}

// TestPersistWideCheckpoint: a wide unit's copy of the factor goes through
// a checkpoint (version 8): a tracker restored mid-run forms the next
// weights bit for bit as the one that ran on, the copy included (its age
// in refreshes kept, so the next copy comes at the same frame); the same
// checkpoint written as version 7 (the copy dropped) restores, and its
// weights differ (a restored unit then copies the restored model's
// factor): the test sees the copy.
func TestPersistWideCheckpoint(t *testing.T) {
	const p, n0, n1 = 150, 1500, 600
	cfg := Config{Period: time.Second, WarmUp: 300, RefreshEvery: 32, Residual: true, FlatFrames: -1, Persist: 3,
		Modes: modes.Config{Count: 3}}
	tr, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	src := newWidePlant(p, 9)
	var sc Score
	x := make([]float64, p)
	frame := func(k int) []float64 {
		src.frame(x)
		if k > 1200 {
			x[0] += 0.02 * float64(k-1200) / 100 // a slow drift, so the weight moves
		}
		return x
	}
	for k := 0; k < n0; k++ {
		if err := tr.Step(&sc, frame(k), nil); err != nil {
			t.Fatal(err)
		}
	}
	ck, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	mb, err := tr.ms.MarshalBinary() // the modes at the checkpoint
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("copy %d refreshes old at the checkpoint (a copy every %d)", tr.rs.nref-tr.ps.pinRef, tr.ps.every)
	xs := make([][]float64, n1)
	for k := range xs {
		xs[k] = slices.Clone(frame(n0 + k))
	}
	run := func(tr *Tracker) (w, d []float64, pins int) {
		p0 := tr.ps.pins
		for _, x := range xs {
			if err := tr.Step(&sc, x, nil); err != nil {
				t.Fatal(err)
			}
			w, d = append(w, tr.ps.w), append(d, tr.ps.last)
		}
		return w, d, tr.ps.pins - p0
	}
	w0, d0, pins0 := run(tr)
	w1, d1, pins1 := run(restoreTracker(t, p, cfg, ck))
	below := 0
	for k := range w0 {
		if w0[k] != w1[k] || d0[k] != d1[k] {
			t.Fatalf("frame %d after the restore: weight %v, D %v; ran on: %v, %v", k, w1[k], d1[k], w0[k], d0[k])
		}
		if w0[k] < 1 {
			below++
		}
	}
	if pins0 != pins1 || pins0 == 0 || below == 0 {
		t.Fatalf("copies %d and %d after the checkpoint, %d weights below 1: the test sees nothing", pins0, pins1, below)
	}
	// Version 7: the copy dropped (the creep flag after it stays).
	cp := 1 + 4 + p + 8*p*(p+1)/2
	at := len(ck) - 4 - len(mb) - 4 - 1 - 1 - cp // the copy, then the creep and level flags (0 here) and the modes
	if ck[at] != 1 {
		t.Fatalf("copy flag %d at byte %d, want 1", ck[at], at)
	}
	lv := len(ck) - 4 - len(mb) - 4 - 1               // the level flag (version 9), which version 7 lacks too
	ck7 := append(bytes.Clone(ck[:lv]), ck[lv+1:]...) // its checksum is written again by asVersion
	w2, d2, _ := run(restoreTracker(t, p, cfg, asVersion(ck7, 7, at, cp)))
	same := true
	for k := range w0 {
		same = same && w2[k] == w0[k] && d2[k] == d0[k]
	}
	if same {
		t.Error("a version 7 checkpoint (no copy of the factor) gave the same weights: the test cannot see the copy")
	}
	// A copy whose first diagonal value is not positive is refused.
	refusesFloat(t, p, cfg, ck, at+1+4+p, -1, "a copy with L₀₀ = −1")
}

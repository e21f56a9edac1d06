package tracker

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"

	"modewatch/tracker/limits"
	"modewatch/tracker/modes"
)

// DefaultRelationSize is the number of sensors per relation mode
// (Config.RelationSize): three, as in one pump's flow, power and head.
const DefaultRelationSize = 3

// relStat holds the relation modes of a Tracker (Config.Relations): sparse
// minor components of the correlation A, each naming the few channels tied
// by one tight linear relation, and the statistic that says which broke.
//
// They are found by the same ConGradU iterations as the modes (package
// modes, Luss & Teboulle 2013), on the precision matrix Ω = (A + ε_R I)⁻¹
// instead of A: Ω's leading directions are A's directions of least
// variance, and Ω is positive definite, as ConGradU needs:
//
//	max xᵀΩx   over ‖x‖₂ = 1, ‖x‖₀ ≤ K.
//
// A tight relation among K channels is a large-variance sparse direction
// of Ω, and its column start (the column of Ω of largest norm, that of the
// channel most tightly held by the others) points along it. Channels out
// of the model get zero rows of Ω. The modes are deflated by projection
// and, unlike the modes, solved from the cold start at every refresh. (The shifted matrix
// λI − A, λ ≥ λ_max, has the same minor directions but its cold start
// led ConGradU to a loose local optimum on the seeded test plant.)
//
// Per frame, relation j with loadings x_j and variance v_j = x_jᵀAx_j
// (floored at ε_R) scores
//
//	s_j = (x_jᵀz)² / v_j   ~ χ²(1) in control,
//
// and the statistic is S = max_j s_j with the limit χ²_{1−α/m}(1) over m
// relations (Bonferroni). Cost: per refresh a factorization and Ω,
// O(p³/2), plus the mode solves; per frame O(m·K).
type relStat struct {
	p, m   int
	ms     *modes.Set
	b      *mat.SymDense
	u, inv []float64
	panel  []float64
	vari   []float64 // v_j
	lim    float64
	ok     bool
	ridge  float64
}

func newRelStat(p int, cfg *Config) (*relStat, error) {
	if cfg.Relations == 0 {
		return nil, nil
	}
	k := min(cfg.RelationSize, p)
	ms, err := modes.NewSet(p, modes.Config{Count: min(cfg.Relations, p),
		Sparsity: []modes.Sparsity{{Method: modes.L0, K: k}}})
	if err != nil {
		return nil, fmt.Errorf("%w: relation modes: %w", ErrConfig, err)
	}
	m := ms.Config().Count
	return &relStat{p: p, m: m, ms: ms, b: mat.NewSymDense(p, nil),
		u: make([]float64, p*p), inv: make([]float64, p*p), panel: make([]float64, p*cholBlock),
		vari: make([]float64, m),
		lim:  limits.ChiSquare(1-cfg.Alpha/float64(m), 1), ridge: cfg.ResidualRidge}, nil
}

// factorInverse sets u to the upper Cholesky factor of A + εI (row-major
// p × p, A in the upper triangle of a) and inv to U⁻¹, by cholUpper and
// forward substitution: row i of U⁻¹ solves Uᵀy = eᵢ (Golub & Van Loan,
// Matrix Computations, §3.1), all rows together by panels of the factor
// (forwardUnit, the factorization's AVX2/FMA kernel where the CPU has it):
// O(p³/3) multiply-adds in all. panel holds cholBlock·p values. It reports
// false when A + εI is not positive definite. The relation modes' factor
// (the residual statistic needs only the factor: factorLower).
func factorInverse(u, inv, panel []float64, a blas64.Symmetric, p int, ridge float64) bool {
	if !cholRidge(u, panel, a, p, ridge) {
		return false
	}
	forwardUnit(inv, p, u, p, nil, panel)
	return true
}

// refresh recomputes the relation modes of the model's correlation.
func (rl *relStat) refresh(m *model) {
	p := rl.p
	a := m.a.RawSymmetric()
	rl.ok = false
	if !factorInverse(rl.u, rl.inv, rl.panel, a, p, rl.ridge) {
		return
	}
	// Ω = U⁻¹U⁻ᵀ (upper triangle), zero outside the model.
	b := rl.b.RawSymmetric()
	inv := rl.inv
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			v := 0.0
			if m.include[i] && m.include[j] {
				ri, rj := inv[i*p+j:i*p+p], inv[j*p+j:j*p+p]
				for k, x := range rj {
					v += ri[k] * x
				}
			}
			b.Data[i*b.Stride+j] = v
		}
	}
	// Cold start at every refresh: the relation modes then depend on A
	// alone, so a tracker restored from a checkpoint (which carries A but
	// not these modes) finds the same ones.
	rl.ms.ColdNext()
	if rl.ms.Refresh(rl.b) != nil || rl.ms.Count() == 0 {
		return
	}
	for j := 0; j < rl.ms.Count(); j++ {
		md := rl.ms.Mode(j)
		v := 0.0
		for _, r := range md.Support {
			for _, c := range md.Support {
				lo, hi := min(r, c), max(r, c)
				v += md.Loadings[r] * a.Data[lo*a.Stride+hi] * md.Loadings[c]
			}
		}
		rl.vari[j] = math.Max(v, rl.ridge)
	}
	rl.ok = true
}

// score sets dst.Relation, RelationLimit and RelationMode for the
// standardized, imputed frame z.
func (rl *relStat) score(dst *Score, z []float64) {
	dst.Relation, dst.RelationLimit, dst.RelationMode = 0, 0, -1
	if !rl.ok {
		return
	}
	best, bj := 0.0, -1
	for j := 0; j < rl.ms.Count(); j++ {
		md := rl.ms.Mode(j)
		s := 0.0
		for _, i := range md.Support {
			s += md.Loadings[i] * z[i]
		}
		s = s * s / rl.vari[j]
		if s > best {
			best, bj = s, j
		}
	}
	dst.Relation, dst.RelationLimit, dst.RelationMode = best, rl.lim, bj
}

// RelationSupport returns the channels of relation mode j of the current
// model (ascending), a read-only view valid until the next refresh; nil
// when there is none. It does not allocate.
func (t *Tracker) RelationSupport(j int) []int {
	if t.rl == nil || !t.rl.ok || j < 0 || j >= t.rl.ms.Count() {
		return nil
	}
	return t.rl.ms.Mode(j).Support
}

// Relation describes one relation mode: the channels it ties, their
// loadings (unit vector) and the relation's variance xᵀAx in
// standardized units (small: a tight relation).
type Relation struct {
	Support  []int
	Loadings []float64 // on Support, same order
	Variance float64
}

// Relations returns the relation modes of the current model (nil unless
// Config.Relations > 0 and a model exists). The slices are fresh copies.
func (t *Tracker) Relations() []Relation {
	if t.rl == nil || !t.rl.ok {
		return nil
	}
	out := make([]Relation, t.rl.ms.Count())
	for j := range out {
		md := t.rl.ms.Mode(j)
		r := Relation{Support: append([]int(nil), md.Support...), Variance: t.rl.vari[j]}
		for _, i := range md.Support {
			r.Loadings = append(r.Loadings, md.Loadings[i])
		}
		out[j] = r
	}
	return out
}

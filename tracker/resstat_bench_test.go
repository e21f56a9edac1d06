package tracker

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkResidualParts measures, at p = 500, the residual statistic's
// pieces: the factor A + ε_R·I = LLᵀ (once per refresh), y = L⁻¹z with
// zᵀΩz (every frame), Ωz = L⁻ᵀy and the diagonal of Ω (only when the RBC
// of R or the variance statistic is read).
func BenchmarkResidualParts(b *testing.B) {
	const p = 500
	rng := rand.New(rand.NewPCG(p, 51))
	s := randomCov(rng, p, 5)
	cfg := Config{Residual: true, ResidualRidge: DefaultResidualRidge, Alpha: 0.01, VarianceLambda: DefaultVarianceLambda}
	rs := newResStat(p, &cfg)
	g := &rs.gens[0]
	if !factorLower(g.l, g.pk, rs.panel, s.RawSymmetric(), p, rs.ridge) {
		b.Fatal("not positive definite")
	}
	z := make([]float64, p)
	for i := range z {
		z[i] = rng.NormFloat64()
	}
	scratch := make([]float64, p*p)
	b.Run("factor", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			factorLower(scratch, nil, rs.panel, s.RawSymmetric(), p, rs.ridge)
		}
	})
	b.Run("forward", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			benchSink += rs.forward(z)
		}
	})
	b.Run("back", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			upperSolveT(rs.v, rs.zb, g.l, p)
		}
	})
	b.Run("diag", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			g.diag = false
			rs.diagOf(g)
		}
	})
}

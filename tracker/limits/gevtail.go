package limits

// FitGEVUnbounded fits a GEV to the block maxima x by maximum likelihood
// under the constraint ξ ≥ 0: the fit for a statistic whose upper tail is
// known to be unbounded, so that its block maxima lie in the Gumbel
// (ξ = 0) or the Fréchet (ξ > 0) domain of attraction, never the Weibull
// one (ξ < 0, a finite upper end point).
//
// A squared Gaussian quantity (a χ²-type chart statistic) has an
// exponential tail and its maxima are in the Gumbel domain (Coles 2001,
// §3.1.5, the exponential example; Leadbetter, Lindgren & Rootzén 1983,
// Extremes and Related Properties of Random Sequences and Processes,
// ch. 3–4, for stationary Gaussian sequences, stated from memory); a
// spread that itself moves over the normal data (a mixture of variances)
// only makes the tail heavier. An unconstrained estimate ξ̂ < 0 from a few
// block maxima is then an artefact of the sample, and it puts every
// return level of small probability just above the largest maximum seen
// (the upper end point μ − σ/ξ lies close to it).
//
// The constrained maximum lies on the boundary when the unconstrained one
// lies outside it (the likelihood, profiled over μ and σ, is unimodal in
// ξ for the samples met here): FitGEV is kept when ξ̂ ≥ 0, else the
// Gumbel (ξ = 0) is fitted by maximum likelihood (FitGumbel).
func FitGEVUnbounded(x []float64) (GEVFit, error) {
	f, err := FitGEV(x)
	if err == nil && f.Xi >= 0 {
		return f, nil
	}
	if err != nil && f.Sigma > 0 && f.Xi >= 0 {
		return f, err // ξ̂ ≥ 0 without a covariance: as FitGEV
	}
	return FitGumbel(x)
}

// FitGumbel fits the Gumbel distribution (the GEV with ξ = 0) to the block
// maxima x by maximum likelihood (Coles 2001, §3.3.2 with ξ fixed), as
// FitGEV does with the shape free: Nelder–Mead over (μ, log σ) from the
// moment estimates, then the observed information of (μ, σ) by central
// differences. Cov holds it in its first two rows and columns and zeros
// for ξ (held fixed). It needs at least 5 finite maxima with some spread.
func FitGumbel(x []float64) (GEVFit, error) { return fitML(x, false, 0) }

// FitGEVShape fits a GEV with its shape held at xi to the block maxima x
// by maximum likelihood over (μ, σ), as FitGumbel does at ξ = 0; Cov holds
// the observed information's inverse for (μ, σ) and zeros for ξ.
func FitGEVShape(x []float64, xi float64) (GEVFit, error) { return fitML(x, false, xi) }

package tracker

import (
	"math"
	"time"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"
)

// Forgetting returns the forgetting factor μ of an exponentially weighted
// estimator whose weights halve every halfLife, sampled every period:
//
//	μ = 2^(−Δt/H),  α = 1 − μ
//
// A frame's weight then falls to one half after H of event time. A zero or
// negative halfLife means no forgetting (μ = 1, a cumulative average).
func Forgetting(period, halfLife time.Duration) float64 {
	if halfLife <= 0 || period <= 0 {
		return 1
	}
	return math.Exp2(-float64(period) / float64(halfLife))
}

// SteadyNEff returns the steady-state Kish effective sample size of an
// exponentially weighted estimator with forgetting factor μ (Kish 1965):
//
//	n_eff = (Σw)²/Σw² = (1 + μ)/(1 − μ)
//
// which is also the span of the moving average with the same variance
// (about twice the memory length 1/(1 − μ)).
func SteadyNEff(mu float64) float64 {
	if mu >= 1 {
		return math.Inf(1)
	}
	return (1 + mu) / (1 - mu)
}

// EW holds exponentially weighted per-channel means and variances and the
// covariance matrix of p channels, updated one frame at a time by the
// weighted incremental formulas of Finch (2009), "Incremental calculation of
// weighted mean and variance", §9 (exponentially weighted):
//
//	δ = x − b;  b ← b + αδ;  C ← (1 − α)(C + αδδᵀ)
//
// With α = 1 − μ this is the forgetting-factor update of recursive PCA
// (Li, Yue, Valle-Cervantes & Qin 2000). Units: b in channel units, C in
// channel units squared.
//
// Start-up: the first frame sets b = x and C = 0. With CumulativeStart the
// step is αₖ = max(1 − μ, 1/k) at the k-th frame of a channel, so the first
// 1/(1 − μ) frames are weighted equally (an ordinary running mean and
// population covariance) before the exponential forgetting takes over;
// without it αₖ = 1 − μ from the second frame on.
//
// Missing channels: a frame updates only the channels it observes. With
// sᵢ = √(1 − αᵢ) and uᵢ = √(αᵢ(1 − αᵢ))·δᵢ for an observed channel and
// sᵢ = 1, uᵢ = 0 for a missing one, the update is the congruence
//
//	C ← S C S + u uᵀ,  S = diag(s)
//
// which equals Finch's update on the observed block, leaves the mean,
// variance and covariances among missing channels untouched, shrinks the
// cross-covariances by √(1 − α) and keeps C positive semidefinite. The same
// form covers channels whose steps differ (a channel still in its
// cumulative start, or added by Grow).
//
// Batching: every frame is buffered (δ and the steps) and B frames are
// folded into C by one rank-B update (syrkUpper, see Flush), which equals
// B single updates up to rounding. Unrolling the congruences,
//
//	C ← D C D + Σₖ (Tₖuₖ)(Tₖuₖ)ᵀ,  Tₖ = Π_{j>k} Sⱼ,  D = Πₖ Sₖ
//
// (diagonal products); when every frame's step is shared by all channels
// this is C ← Πₖ(1 − αₖ)·C + Σₖ cₖ δₖδₖᵀ, cₖ = αₖ(1 − αₖ)·Π_{j>k}(1 − αⱼ).
//
// Means and variances are always current; the covariance is current after
// Flush.
type EW struct {
	p          int
	mu         float64
	cumulative bool

	mean  []float64
	vari  []float64
	count []float64 // frames seen per channel
	sumW2 []float64 // Σw² of the normalised weights per channel (Kish)

	cov blas64.Symmetric // upper triangle, p × p

	// Batch buffer: up to capB frames of δ (the deviation from the mean
	// before the frame; 0 for a missing channel), stored channel-major
	// (p × ldb, so row i holds channel i's deviations and the update is a
	// dot-product form rank-B update), and their steps α: alphas[k] when
	// frame k has one step for all channels, else NaN and the per-channel
	// steps in al (p × ldb, 0 for a missing channel).
	rows   []float64
	al     []float64
	alphas []float64
	nb     int
	capB   int
	ldb    int // row stride of rows: capB rounded up to a multiple of 4 (the kernel's step)

	sa, s1 []float64 // Flush scratch per frame: √(α(1−α)), √(1−α)
	ref    []float64 // Flush scratch per frame with steps differing by channel: the step sa, s1 hold
	s, d   []float64 // scratch per channel
}

// NewEW returns an estimator for p channels with forgetting factor mu
// (0 < μ ≤ 1) that buffers up to batch complete frames (batch < 1 means 1,
// no buffering).
func NewEW(p int, mu float64, batch int, cumulativeStart bool) *EW {
	if p < 1 || !(mu > 0 && mu <= 1) {
		panic("tracker: NewEW: bad size or forgetting factor")
	}
	if batch < 1 {
		batch = 1
	}
	ld := roundUp4(batch)
	e := &EW{
		p: p, mu: mu, cumulative: cumulativeStart,
		mean: make([]float64, p), vari: make([]float64, p),
		count: make([]float64, p), sumW2: make([]float64, p),
		cov:  blas64.Symmetric{N: p, Stride: p, Data: make([]float64, p*p), Uplo: blas.Upper},
		rows: make([]float64, ld*p), al: make([]float64, ld*p), alphas: make([]float64, batch),
		capB: batch, ldb: ld,
		sa: make([]float64, batch), s1: make([]float64, batch), ref: make([]float64, batch),
		s: make([]float64, p), d: make([]float64, p),
	}
	return e
}

// step returns the step α for a channel about to see its k-th frame (k ≥ 1).
func (e *EW) step(k float64) float64 {
	if k <= 1 {
		return 1
	}
	a := 1 - e.mu
	if e.cumulative && 1/k > a {
		return 1 / k
	}
	return a
}

// pendingDecay returns Π √(1 − αₖ) over the frames of the batch not yet
// folded into the covariance, for channel i: the factor Flush scales row
// and column i of C by (Dᵢ in the comment of EW).
func (e *EW) pendingDecay(i int) float64 {
	d, f := e.pendingDecayHead()
	return e.pendingDecayFrom(i, d, f)
}

// pendingDecayHead returns the part of pendingDecay shared by every
// channel: the product d over the leading frames of the batch whose step
// was one for all channels, and the index f of the first frame whose steps
// differ by channel (e.nb if none). pendingDecayFrom(i, d, f) completes it
// for channel i with the same products in the same order, so a caller that
// needs many channels' decays takes the shared part once.
func (e *EW) pendingDecayHead() (d float64, f int) {
	d = 1.0
	for f = 0; f < e.nb; f++ {
		a := e.alphas[f]
		if math.IsNaN(a) {
			break
		}
		d *= math.Sqrt(1 - a)
	}
	return d, f
}

// pendingDecayFrom completes pendingDecayHead's product d, whose first
// per-channel frame is f, for channel i.
func (e *EW) pendingDecayFrom(i int, d float64, f int) float64 {
	for k := f; k < e.nb; k++ {
		a := e.alphas[k]
		if math.IsNaN(a) {
			a = e.al[i*e.ldb+k]
		}
		d *= math.Sqrt(1 - a)
	}
	return d
}

// wstep is the step of weight w: α·w, except the first frame's α = 1.
func (e *EW) wstep(k, w float64) float64 {
	a := e.step(k)
	if a < 1 {
		a *= w
	}
	return a
}

// Update folds one frame into the estimates. observed may be nil (all
// observed); x[i] is ignored where observed[i] is false. x must be finite
// where observed. The frame joins the batch; the covariance is updated at
// Flush (every capB frames, or when read).
func (e *EW) Update(x []float64, observed []bool) { e.UpdateWeighted(x, observed, 1) }

// UpdateWeighted folds one frame into the estimates with weight w in
// (0, 1]: every step α is scaled by w, so the frame counts as w of a frame
// (w = 1 is Update). Used for bounded-influence learning (see
// Tracker.StepMasked).
func (e *EW) UpdateWeighted(x []float64, observed []bool, w float64) {
	if len(x) != e.p || (observed != nil && len(observed) != e.p) {
		panic("tracker: EW.Update: length mismatch")
	}
	k, ld := e.nb, e.ldb
	// Common case: every channel observed with the same count, so one step.
	uniform := observed == nil
	c0 := e.count[0]
	if uniform {
		for _, c := range e.count {
			if c != c0 {
				uniform = false
				break
			}
		}
	}
	if uniform {
		a := e.wstep(c0+1, w)
		for i := 0; i < e.p; i++ {
			d := x[i] - e.mean[i]
			e.rows[i*ld+k] = d
			e.updateChannel(i, x[i], d, a)
		}
		e.alphas[k] = a
	} else {
		same := true
		a0 := 0.0
		for i := 0; i < e.p; i++ {
			a, d := 0.0, 0.0
			if observed == nil || observed[i] {
				a = e.wstep(e.count[i]+1, w)
				d = x[i] - e.mean[i]
				e.updateChannel(i, x[i], d, a)
			}
			e.rows[i*ld+k] = d
			e.al[i*ld+k] = a
			if i == 0 {
				a0 = a
			} else if a != a0 {
				same = false
			}
		}
		if same {
			e.alphas[k] = a0
		} else {
			e.alphas[k] = math.NaN()
		}
	}
	e.nb++
	if e.nb == e.capB {
		e.Flush()
	}
}

func (e *EW) updateChannel(i int, x, d, a float64) {
	e.count[i]++
	if a >= 1 {
		e.mean[i] = x
		e.vari[i] = 0
		e.sumW2[i] = 1
		return
	}
	e.mean[i] += a * d
	e.vari[i] = (1 - a) * (e.vari[i] + a*d*d)
	e.sumW2[i] = (1-a)*(1-a)*e.sumW2[i] + a*a
}

// Flush folds the buffered frames into the covariance with one rank-B
// update: the own upper-triangle kernel syrkUpper (AVX2/FMA on amd64 CPUs
// that have it, about 5× gonum's blas64.Syrk at p = 500, B = 64:
// BenchmarkSyrkKernel), else blas64.Syrk. Row k of channel i is scaled by
// Tₖᵢ·√(αₖᵢ(1 − αₖᵢ)); C is scaled by DᵢDⱼ first (by the single factor
// Π(1 − αₖ) when every frame had one step for all channels).
func (e *EW) Flush() {
	nb := e.nb
	if nb == 0 {
		return
	}
	ld := e.ldb
	uniform := true
	for k := 0; k < nb; k++ {
		a := e.alphas[k]
		if math.IsNaN(a) {
			// Steps differ by channel; most are usually one value (the
			// others 0 for missing channels): precompute for the first
			// nonzero step, which gives the same numbers as per entry.
			uniform = false
			a = 0
			for i := 0; i < e.p; i++ {
				if v := e.al[i*ld+k]; v != 0 {
					a = v
					break
				}
			}
			e.ref[k] = a
		}
		e.sa[k] = math.Sqrt(a * (1 - a))
		e.s1[k] = math.Sqrt(1 - a)
	}
	kk := nb
	if hasAVX2FMA {
		kk = roundUp4(nb) // the vector loop's step; padded with zeros
	}
	for i := 0; i < e.p; i++ {
		row := e.rows[i*ld : i*ld+kk]
		al := e.al[i*ld : i*ld+nb]
		ts := 1.0 // Π_{j>k} √(1 − α_j) of channel i
		for k := nb - 1; k >= 0; k-- {
			sa, s1 := e.sa[k], e.s1[k]
			if math.IsNaN(e.alphas[k]) {
				switch a := al[k]; a {
				case e.ref[k]:
				case 0: // missing
					sa, s1 = 0, 1
				default:
					sa, s1 = math.Sqrt(a*(1-a)), math.Sqrt(1-a)
				}
			}
			row[k] *= sa * ts
			ts *= s1
		}
		for k := nb; k < kk; k++ {
			row[k] = 0
		}
		e.d[i] = ts
	}
	beta := 1.0
	if uniform {
		beta = e.d[0] * e.d[0]
	} else {
		n := e.p
		for i := 0; i < n; i++ {
			di := e.d[i]
			r := e.cov.Data[i*n+i : i*n+n]
			dd := e.d[i:n]
			dd = dd[:len(r)]
			for j, dj := range dd {
				r[j] *= di * dj
			}
		}
	}
	rankUpdate(e.p, kk, e.rows, ld, 1, beta, e.cov.Data, e.cov.Stride)
	e.nb = 0
}

func roundUp4(n int) int { return (n + 3) &^ 3 }

// P returns the number of channels.
func (e *EW) P() int { return e.p }

// grown returns a copy of e widened to p2 channels (after a Flush): the
// statistics of the first p channels are kept, the new channels have no
// frames yet.
func (e *EW) grown(p2 int) *EW {
	e.Flush()
	g := NewEW(p2, e.mu, e.capB, e.cumulative)
	copy(g.mean, e.mean)
	copy(g.vari, e.vari)
	copy(g.count, e.count)
	copy(g.sumW2, e.sumW2)
	for i := 0; i < e.p; i++ {
		copy(g.cov.Data[i*p2+i:i*p2+e.p], e.cov.Data[i*e.p+i:i*e.p+e.p])
	}
	return g
}

// Mean returns the EW mean of channel i (channel units).
func (e *EW) Mean(i int) float64 { return e.mean[i] }

// Var returns the EW variance of channel i (channel units squared).
func (e *EW) Var(i int) float64 { return e.vari[i] }

// Count returns how many frames have updated channel i.
func (e *EW) Count(i int) float64 { return e.count[i] }

// NEff returns the Kish effective sample size of channel i,
// n_eff = (Σw)²/Σw² (Kish 1965, Survey Sampling), 0 before the first frame.
func (e *EW) NEff(i int) float64 {
	if e.sumW2[i] == 0 {
		return 0
	}
	return 1 / e.sumW2[i]
}

// MeanTo copies the means into dst (len p) and returns it.
func (e *EW) MeanTo(dst []float64) []float64 { copy(dst, e.mean); return dst }

// VarTo copies the variances into dst (len p) and returns it.
func (e *EW) VarTo(dst []float64) []float64 { copy(dst, e.vari); return dst }

// CovTo flushes the batch and copies the covariance into dst (p × p).
func (e *EW) CovTo(dst *mat.SymDense) {
	e.Flush()
	dst.SetRawSymmetric(copySym(dst.RawSymmetric(), e.cov))
}

func copySym(dst, src blas64.Symmetric) blas64.Symmetric {
	n := src.N
	if dst.N != n {
		panic("tracker: covariance size mismatch")
	}
	for i := 0; i < n; i++ {
		copy(dst.Data[i*dst.Stride+i:i*dst.Stride+n], src.Data[i*src.Stride+i:i*src.Stride+n])
	}
	return dst
}

// CorrTo flushes the batch and writes the correlation matrix of the channels
// into dst (p × p): Aᵢⱼ = Cᵢⱼ/√(CᵢᵢCⱼⱼ) for channels with include[i] true,
// and zero rows and columns for the others (include nil means all). A
// channel with zero variance must be excluded by the caller.
func (e *EW) CorrTo(dst *mat.SymDense, include []bool) {
	e.Flush()
	n := e.p
	raw := dst.RawSymmetric()
	if raw.N != n {
		panic("tracker: correlation size mismatch")
	}
	for i := 0; i < n; i++ {
		e.s[i] = 0
		if (include == nil || include[i]) && e.cov.Data[i*n+i] > 0 {
			e.s[i] = 1 / math.Sqrt(e.cov.Data[i*n+i])
		}
	}
	for i := 0; i < n; i++ {
		src := e.cov.Data[i*n+i : i*n+n]
		d := raw.Data[i*raw.Stride+i : i*raw.Stride+n]
		si := e.s[i]
		sr := e.s[i:n]
		d = d[:len(sr)]
		src = src[:len(sr)]
		for j, sj := range sr {
			d[j] = src[j] * si * sj
		}
		if si != 0 {
			d[0] = 1
		}
	}
}

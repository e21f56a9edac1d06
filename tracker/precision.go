package tracker

// precisionRows sets the first k = len(miss) rows of h (row x at
// h[x·p:], stride p) to the rows Ω_{mₓ,:} of the precision matrix
// Ω = (A + εI)⁻¹ = U⁻¹U⁻ᵀ of the missing channels miss (sorted), from the
// upper Cholesky factor U of m.chol (factorRidge), and the padding rows
// k…roundUp4(k)−1 to zero; h must hold roundUp4(k)·p values (setMiss).
//
// Each row is two triangular solves, Uᵀyₓ = e_{mₓ} (yₓ is zero before mₓ)
// and U wₓ = yₓ, so Ωeₘ = wₓ (Golub & Van Loan, Matrix Computations,
// §3.1 and §4.2). They are done for all missing channels together by
// panels of cholBlock rows of U, as a triangular solve with k right-hand
// sides in blocked form (§3.1.5): within a panel, row-by-row substitution;
// then the rest of the right-hand sides is updated with the whole panel at
// once, four right-hand sides at a time, by the AVX2/FMA kernels of the
// factorization where the CPU has them:
//
//	forward, after rows r₀…r₁−1:  y[r₁:] −= Σ_{l=r₀}^{r₁−1} U[l, r₁:]·y[l]   (gerUpdAVX2)
//	backward, before rows r₀…r₁−1: y[r] −= U[r, r₁:]·w[r₁:],  r₀ ≤ r < r₁     (syrkRow4AVX2)
//
// The arithmetic is that of the substitutions, summed in another order,
// so the rows agree with the one-right-hand-side solves to rounding.
// Cost k·p² multiply-adds at most (less the zero head of each yₓ); no
// allocation (the panel scratch of the factorization is reused).
func (m *model) precisionRows(h []float64, miss []int) {
	precisionRowsOf(h, miss, m.chol, m.p, m.panel)
}

// precisionRowsOf is precisionRows from the upper factor u (row-major
// p × p, upper triangle) with pbuf its cholBlock·p scratch.
func precisionRowsOf(h []float64, miss []int, u []float64, p int, pbuf []float64) {
	k := len(miss)
	kp := roundUp4(k)
	h = h[:kp*p]
	forwardUnit(h, kp, u, p, miss, pbuf)
	const bs = cholBlock
	// Backward: U w = y in place, by panels from the bottom (their starts
	// b1 = p − j·cholBlock, so the kernel's length p − b1 is a multiple of 4).
	var s [4 * bs]float64
	for b1 := p; b1 > 0; b1 -= bs {
		b0 := max(b1-bs, 0)
		nb := b1 - b0
		for g := 0; g < k; g += 4 {
			ge := min(g+4, k)
			s = [4 * bs]float64{}
			if b1 < p {
				done := 0
				if rowKernel(h[g*p+b1:], p, p-b1, u[b0*p+b1:], nb, s[:], bs, 1, 0) {
					done = nb &^ 1
				}
				for j := done; j < nb; j++ {
					row := u[(b0+j)*p+b1 : (b0+j)*p+p]
					for x := g; x < ge; x++ {
						s[(x-g)*bs+j] = dot(row, h[x*p+b1:(x+1)*p])
					}
				}
			}
			for r := b1 - 1; r >= b0; r-- {
				d := u[r*p+r]
				row := u[r*p+r+1 : r*p+b1]
				for x := g; x < ge; x++ {
					y := h[x*p : (x+1)*p]
					y[r] = (y[r] - s[(x-g)*bs+r-b0] - dot(row, y[r+1:b1])) / d
				}
			}
		}
	}
}

// forwardUnit sets the first rows rows of h (stride p) to zero and then
// row x < k to the solution y of Uᵀy = e_c, c = miss[x] (miss nil: c = x,
// k = rows), which is row c of U⁻¹ (zero before c): forward substitution
// with the upper factor U (row-major p × p) for all the right-hand sides
// together, by panels of cholBlock rows (see precisionRows), the panel
// update four rows of h at a time by gerUpdAVX2 where the CPU has it and
// h holds the four rows (rows k…rows−1 are zero and stay zero). miss must
// be sorted. pbuf holds cholBlock·p values (the factorization's panel
// scratch). Cost Σₓ (p − cₓ)²/2 multiply-adds; no allocation.
func forwardUnit(h []float64, rows int, u []float64, p int, miss []int, pbuf []float64) {
	k := rows
	if miss != nil {
		k = len(miss)
	}
	col := func(x int) int {
		if miss == nil {
			return x
		}
		return miss[x]
	}
	h = h[:rows*p]
	for j := range h {
		h[j] = 0
	}
	if k == 0 {
		return
	}
	for x := 0; x < k; x++ {
		h[x*p+col(x)] = 1
	}
	const bs = cholBlock
	pbuf = pbuf[:bs*p] // the panel of y values, rows at stride p (the kernel's)
	// y is zero before its own channel: start at the first one.
	for b0 := col(0); b0 < p; b0 += bs {
		b1 := min(b0+bs, p)
		for g := 0; g < k; g += 4 {
			if col(g) >= b1 {
				break // this group and the later ones are still zero here
			}
			ge := min(g+4, k)
			for r := b0; r < b1; r++ {
				d := u[r*p+r]
				row := u[r*p+r+1 : r*p+b1]
				for x := g; x < ge; x++ {
					y := h[x*p : (x+1)*p]
					v := y[r] / d
					y[r] = v
					if v == 0 {
						continue
					}
					yy := y[r+1 : b1]
					yy = yy[:len(row)]
					for c, uv := range row {
						yy[c] -= uv * v
					}
				}
			}
			if b1 == p {
				continue
			}
			done := 0
			if hasAVX2FMA && p-b1 >= 8 && g+4 <= rows {
				for l := 0; l < b1-b0; l++ {
					pr := pbuf[l*p : l*p+4]
					for j := range pr {
						pr[j] = h[(g+j)*p+b0+l] // rows past k are zero
					}
				}
				done = gerKernel(pbuf, u[b0*p+b1:], p, b1-b0, h[g*p+b1:], p, p-b1)
			}
			for x := g; x < ge; x++ {
				y := h[x*p : (x+1)*p]
				yy := y[b1+done : p]
				for l := b0; l < b1; l++ {
					v := y[l]
					if v == 0 {
						continue
					}
					row := u[l*p+b1+done : l*p+p]
					row = row[:len(yy)]
					for c, uv := range row {
						yy[c] -= uv * v
					}
				}
			}
		}
	}
}

package tracker

// phiZ is scoreZ for the learning pass of a masked frame (learnFrame),
// which reads only φ: T², SPE and φ of the standardized (and imputed)
// frame in w.z under pattern pt, the same sums in the same order as
// scoreZ, so the same bits, without the per-channel contributions (w.dz,
// w.e and the contribution arrays are not written).
func (m *model) phiZ(w *work, pt *pattern) (t2, spe, phi float64) {
	p, R, r, rq := m.p, m.maxR, m.r, m.rq
	z := w.z
	nw := r + rq
	tq := w.tq[:nw]
	for j := range tq {
		tq[j] = 0
	}
	act := m.act
	pq := m.pq[:len(act)*nw]
	for a, i := range act {
		zi := z[i]
		if zi == 0 {
			continue
		}
		row := pq[a*nw : a*nw+nw]
		for j, v := range row {
			tq[j] += v * zi
		}
	}
	tv, qv := tq[:r], tq[r:]
	for a := 0; a < r; a++ {
		mr := pt.minv[a*R : a*R+r]
		s := 0.0
		for b, v := range mr {
			s += v * tv[b]
		}
		t2 += tv[a] * s
	}
	next, a := p, 0
	if len(act) > 0 {
		next = act[0]
	}
	for i, zi := range z[:p] {
		e := zi
		if i == next {
			for j, v := range pq[a*nw+r : a*nw+nw] {
				e -= v * qv[j]
			}
			a++
			next = p
			if a < len(act) {
				next = act[a]
			}
		}
		spe += e * e
	}
	return t2, spe, spe/pt.speLim + t2/pt.t2Lim
}

package tracker

// phiZ is scoreZ for the learning pass of a masked frame (learnFrame),
// which reads only φ: T², SPE and φ of the standardized (and imputed)
// frame in w.z under pattern pt, the same sums in the same order as
// scoreZ, so the same bits, without the per-channel contributions (w.dz,
// w.e and the contribution arrays are not written).
func (m *model) phiZ(w *work, pt *pattern) (t2, spe, phi float64) {
	p, r, rq := m.p, m.r, m.rq
	nw := r + rq
	t2 = m.modeScores(w, pt)
	act := m.act
	pq := m.pq[:len(act)*nw]
	qv := w.tq[r:nw]
	next, a := p, 0
	if len(act) > 0 {
		next = act[0]
	}
	for i, zi := range w.z[:p] {
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

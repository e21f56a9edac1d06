package tracker

// ResidualDims returns the dimension of the residual subspace of the
// current model: the channels in the model (not stuck, excluded or
// warming) less the number of modes, 0 before the first model. SPE and
// the residual statistics live in this subspace; the automatic mode count
// keeps it at least 1 (package modes, Config.MinAdjusted).
func (t *Tracker) ResidualDims() int {
	if !t.ready {
		return 0
	}
	n := 0
	for _, in := range t.mdl.include {
		if in {
			n++
		}
	}
	return max(n-t.mdl.r, 0)
}

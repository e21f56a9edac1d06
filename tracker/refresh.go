package tracker

import "gonum.org/v1/gonum/mat"

// refreshNext holds the correlation and the channels a Refresh forms
// beside the model's, so that a failed Refresh leaves the model whole; a
// successful one swaps them with the model's.
type refreshNext struct {
	a       *mat.SymDense
	include []bool
}

// sized returns nx with storage for p channels, allocating at the first
// Refresh and after Grow only.
func (nx *refreshNext) sized(p int) *refreshNext {
	if len(nx.include) != p {
		nx.a, nx.include = mat.NewSymDense(p, nil), make([]bool, p)
	}
	return nx
}

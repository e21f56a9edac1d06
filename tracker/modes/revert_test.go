package modes

import (
	"bytes"
	"math/rand/v2"
	"testing"
)

// Revert returns a Set to where it stood before its last Refresh: the same
// checkpoint bytes (modes, identities, counters), and the next Refresh
// gives what it gives on a Set that never saw the reverted matrix.
func TestRevert(t *testing.T) {
	a := loadPitprops(t)
	b := randomPSD(rand.New(rand.NewPCG(3, 4)), 13, 40)
	cfg := Config{Sparsity: []Sparsity{{Method: L0, K: 5}}, Count: 3}
	s, _ := NewSet(13, cfg)
	ref, _ := NewSet(13, cfg)
	if s.Revert() {
		t.Error("Revert before any Refresh reported an undo")
	}
	both := func() {
		for _, m := range []*Set{s, ref} {
			if err := m.Refresh(a); err != nil {
				t.Fatal(err)
			}
		}
	}
	both()
	want, _ := s.MarshalBinary()
	iters := s.Iterations()
	if err := s.Refresh(b); err != nil {
		t.Fatal(err)
	}
	if !s.Revert() {
		t.Fatal("Revert after a Refresh reported nothing to undo")
	}
	if got, _ := s.MarshalBinary(); !bytes.Equal(got, want) || s.Iterations() != iters {
		t.Error("reverted set differs from the set before the Refresh")
	}
	if s.Revert() {
		t.Error("a second Revert reported an undo")
	}
	// Both continue alike (warm starts and cold schedule restored).
	both()
	g1, _ := s.MarshalBinary()
	g2, _ := ref.MarshalBinary()
	if !bytes.Equal(g1, g2) {
		t.Error("after Revert and Refresh the set differs from one that never saw the reverted matrix")
	}
	// Restoring a checkpoint leaves nothing to undo.
	if err := s.UnmarshalBinary(want); err != nil {
		t.Fatal(err)
	}
	if s.Revert() {
		t.Error("Revert after UnmarshalBinary reported an undo")
	}
}

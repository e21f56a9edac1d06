package modes

import (
	"errors"
	"slices"
	"testing"
)

func TestCheckpointRoundTrip(t *testing.T) {
	a := loadPitprops(t)
	cfg := Config{Sparsity: []Sparsity{{Method: L0, K: 7}, {Method: L0, K: 4}, {Method: L1PenSqrt, Gamma: 0.3}}, Count: 3, ColdEvery: -1}
	tr, _ := NewSet(13, cfg)
	if err := tr.Refresh(a); err != nil {
		t.Fatal(err)
	}
	b, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	rt, _ := NewSet(13, cfg)
	if err := rt.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	if rt.Count() != tr.Count() || rt.TotalVariance() != tr.TotalVariance() {
		t.Fatalf("restored %d modes, trace %g", rt.Count(), rt.TotalVariance())
	}
	for j := 0; j < tr.Count(); j++ {
		m, r := tr.Mode(j), rt.Mode(j)
		if m.ID != r.ID || !slices.Equal(m.Support, r.Support) || !slices.Equal(m.Loadings, r.Loadings) ||
			m.Variance != r.Variance || m.AdjustedVariance != r.AdjustedVariance || m.Iterations != r.Iterations ||
			m.Converged != r.Converged || m.DeflatedVariance != r.DeflatedVariance {
			t.Errorf("mode %d: restored %+v, want %+v", j, r, m)
		}
	}
	// The restored set continues warm: same IDs, few iterations.
	if err := rt.Refresh(a); err != nil {
		t.Fatal(err)
	}
	for j := 0; j < rt.Count(); j++ {
		if m := rt.Mode(j); m.ID != tr.Mode(j).ID || m.Cold || m.Iterations > 2 {
			t.Errorf("after restore, mode %d: id %d cold %v iterations %d", j, m.ID, m.Cold, m.Iterations)
		}
	}
	// An empty set round-trips too.
	e, _ := NewSet(13, cfg)
	eb, _ := e.MarshalBinary()
	if err := rt.UnmarshalBinary(eb); err != nil || rt.Count() != 0 {
		t.Errorf("empty checkpoint: %v, %d modes", err, rt.Count())
	}
}

func TestCheckpointCorrupt(t *testing.T) {
	a := loadPitprops(t)
	cfg := Config{Sparsity: []Sparsity{{Method: L0, K: 5}}, Count: 2}
	tr, _ := NewSet(13, cfg)
	if err := tr.Refresh(a); err != nil {
		t.Fatal(err)
	}
	good, _ := tr.MarshalBinary()
	flip := func(i int) []byte {
		b := append([]byte(nil), good...)
		b[i] ^= 0x40
		return b
	}
	cases := map[string][]byte{
		"empty":          nil,
		"short":          good[:5],
		"truncated":      good[:len(good)-9],
		"bad magic":      append([]byte("XXXX"), good[4:]...),
		"flipped header": flip(8),
		"flipped value":  flip(len(good) / 2),
		"flipped crc":    flip(len(good) - 1),
		"extra byte":     append(append([]byte(nil), good...), 0),
	}
	v2 := append([]byte(nil), good...)
	v2[4] = 2
	cases["future version"] = v2
	for name, b := range cases {
		rt, _ := NewSet(13, cfg)
		if err := rt.Refresh(a); err != nil {
			t.Fatal(err)
		}
		before := append([]float64(nil), rt.Mode(0).Loadings...)
		err := rt.UnmarshalBinary(b)
		if !errors.Is(err, ErrCheckpoint) {
			t.Errorf("%s: error %v, want ErrCheckpoint", name, err)
		}
		if rt.Count() != 2 || !slices.Equal(rt.Mode(0).Loadings, before) {
			t.Errorf("%s: set changed by a failed restore", name)
		}
	}
	// Dimension and deflation must match the set.
	other, _ := NewSet(12, Config{Count: 2})
	if err := other.UnmarshalBinary(good); !errors.Is(err, ErrCheckpoint) {
		t.Errorf("p mismatch: %v", err)
	}
	schur, _ := NewSet(13, Config{Count: 2, Deflation: Schur})
	if err := schur.UnmarshalBinary(good); !errors.Is(err, ErrCheckpoint) {
		t.Errorf("deflation mismatch: %v", err)
	}
	small, _ := NewSet(13, Config{Count: 1})
	if err := small.UnmarshalBinary(good); !errors.Is(err, ErrCheckpoint) {
		t.Errorf("too many modes: %v", err)
	}
}

// FuzzUnmarshal: arbitrary bytes never panic and never leave NaN loadings.
func FuzzUnmarshal(f *testing.F) {
	a := loadPitprops(f)
	tr, _ := NewSet(13, Config{Count: 2})
	_ = tr.Refresh(a)
	good, _ := tr.MarshalBinary()
	f.Add(good)
	f.Add([]byte("MWMD"))
	f.Fuzz(func(t *testing.T, b []byte) {
		rt, _ := NewSet(13, Config{Count: 2})
		if err := rt.UnmarshalBinary(b); err != nil {
			return
		}
		for j := 0; j < rt.Count(); j++ {
			for _, v := range rt.Mode(j).Loadings {
				if v != v {
					t.Fatal("NaN loading restored")
				}
			}
		}
	})
}

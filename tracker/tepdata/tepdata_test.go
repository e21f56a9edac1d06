package tepdata

import (
	"errors"
	"io/fs"
	"testing"
)

// TestLoadShapes: the files have the sizes of the Braatz distribution —
// 500 training and 960 test observations of 52 variables (SOURCE.md;
// Chiang, Russell & Braatz 2001); d00.dat, stored 52 × 500, comes back
// transposed.
func TestLoadShapes(t *testing.T) {
	for _, tc := range []struct {
		name string
		rows int
	}{
		{"d00.dat", 500},
		{"d00_te.dat", 960},
		{"d01_te.dat", 960},
		{"d21_te.dat", 960},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rows, err := Load(tc.name)
			if err != nil {
				t.Fatal(err)
			}
			if len(rows) != tc.rows {
				t.Errorf("%d observations, want %d", len(rows), tc.rows)
			}
			for k, r := range rows {
				if len(r) != Vars {
					t.Fatalf("observation %d: %d variables, want %d", k+1, len(r), Vars)
				}
			}
		})
	}
	if n := Names(); len(n) != Vars || n[0] != "xmeas01" || n[40] != "xmeas41" || n[41] != "xmv01" || n[51] != "xmv11" {
		t.Errorf("names %v", n)
	}
}

// TestLoadMissing: an unknown file is an error that wraps fs.ErrNotExist.
func TestLoadMissing(t *testing.T) {
	if _, err := Load("d99.dat"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("error %v, want fs.ErrNotExist", err)
	}
}

// Package tepdata loads the Tennessee Eastman benchmark data shipped for
// tests in tracker/testdata/tep (see SOURCE.md, LICENSE and PUBLISHED.md
// there): the normal training set d00.dat, the normal test set d00_te.dat
// and the fault test sets d01_te.dat … d21_te.dat, gzip-compressed.
//
// It is test support: the tracker tests and the end-to-end command tests
// read the same files through it. It finds the data beside its own source
// file, so it works from the test of any package in a checkout of the
// module.
package tepdata

import (
	"bufio"
	"compress/gzip"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
)

// Vars is the number of variables of every observation: XMEAS(1)–XMEAS(41)
// then XMV(1)–XMV(11) (SOURCE.md, "Format").
const Vars = 52

// PublishedT2 and PublishedQ are the published PCA detection rates for
// faults 1 … 21 (index 0 … 20) on samples 161–960 of d01_te … d21_te, with
// 11 components fitted on rows 21–500 of d00.dat and each limit at 1 % false
// alarms on d00_te.dat (Russell, Chiang & Braatz 2000, Table (PCA);
// recalled, confirmed by reproduction — testdata/tep/PUBLISHED.md).
var (
	PublishedT2 = [21]float64{.992, .980, .002, .044, .225, .989, .915, .966, .006, .334, .206, .971, .940, .842, .012, .166, .741, .887, .004, .299, .264}
	PublishedQ  = [21]float64{.997, .986, .009, .962, .254, 1.000, 1.000, .976, .019, .341, .644, .975, .955, 1.000, .027, .245, .892, .899, .127, .450, .430}
)

// Dir returns the directory that holds the data files, tracker/testdata/tep
// of the module checkout this package was built from.
func Dir() string {
	_, file, _, ok := runtime.Caller(0)
	if !ok {
		panic("tepdata: no caller information to locate the data")
	}
	return filepath.Join(filepath.Dir(file), "..", "testdata", "tep")
}

// Names returns the 52 variable names in file order: xmeas01 … xmeas41,
// xmv01 … xmv11.
func Names() []string {
	n := make([]string, 0, Vars)
	for i := 1; i <= 41; i++ {
		n = append(n, fmt.Sprintf("xmeas%02d", i))
	}
	for i := 1; i <= 11; i++ {
		n = append(n, fmt.Sprintf("xmv%02d", i))
	}
	return n
}

// Load reads the data file name (for example "d00.dat" or "d05_te.dat";
// stored as name+".gz" in Dir) and returns one row of Vars values per
// observation. The files hold whitespace-separated numbers, one observation
// per line, except d00.dat, which is stored transposed (52 lines of 500
// values) and is transposed back here. An error names the file, line and
// field.
func Load(name string) ([][]float64, error) {
	f, err := os.Open(filepath.Join(Dir(), name+".gz"))
	if err != nil {
		return nil, fmt.Errorf("tepdata: %w", err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		return nil, fmt.Errorf("tepdata: %s: %w", name, err)
	}
	var rows [][]float64
	sc := bufio.NewScanner(zr)
	sc.Buffer(make([]byte, 1<<20), 1<<22)
	for line := 1; sc.Scan(); line++ {
		fs := strings.Fields(sc.Text())
		if len(fs) == 0 {
			continue
		}
		row := make([]float64, len(fs))
		for i, s := range fs {
			if row[i], err = strconv.ParseFloat(s, 64); err != nil {
				return nil, fmt.Errorf("tepdata: %s:%d: field %d: %w", name, line, i+1, err)
			}
		}
		rows = append(rows, row)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("tepdata: %s: %w", name, err)
	}
	if len(rows) == 0 {
		return nil, fmt.Errorf("tepdata: %s: no observations", name)
	}
	if name == "d00.dat" { // stored 52 × 500
		for k, r := range rows {
			if len(r) != len(rows[0]) {
				return nil, fmt.Errorf("tepdata: %s:%d: %d values, want %d as on line 1", name, k+1, len(r), len(rows[0]))
			}
		}
		tr := make([][]float64, len(rows[0]))
		for k := range tr {
			tr[k] = make([]float64, len(rows))
			for i := range rows {
				tr[k][i] = rows[i][k]
			}
		}
		rows = tr
	}
	for k, r := range rows {
		if len(r) != Vars {
			return nil, fmt.Errorf("tepdata: %s: observation %d has %d variables, want %d", name, k+1, len(r), Vars)
		}
	}
	return rows, nil
}

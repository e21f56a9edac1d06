package tune_test

import (
	"fmt"

	"modewatch/cmd/modewatch/internal/tune"
)

// A grid of two sparsities and two on-delays expands into four settings,
// the first listed key varying slowest.
func ExampleParseGrid() {
	g, err := tune.ParseGrid("grid.yaml", []byte(`
on_delay: ["3/5", "6/10"]
sparsity: ["l0:4", none]
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, s := range g.Settings() {
		fmt.Println(s)
	}
	_, err = tune.ParseGrid("bad.yaml", []byte("alpha: [0.01, 0.9]\nmodes: [zero]\n"))
	fmt.Println(err)
	// Output:
	// sparsity=l0:4 on_delay=3/5
	// sparsity=l0:4 on_delay=6/10
	// sparsity=none on_delay=3/5
	// sparsity=none on_delay=6/10
	// configs: 2 problem(s):
	// bad.yaml:1:15: alpha[1]: "0.9" is not a false-alarm rate in (0, 0.5)
	// bad.yaml:2:9: modes[0]: modes "zero": want N (a whole number ≥ 1) or auto:SHARE
}

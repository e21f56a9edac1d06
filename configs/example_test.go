package configs_test

import (
	"fmt"

	"modewatch/configs"
)

// ExampleParse shows that every problem comes back at once, each with its
// file:line:column and key path.
func ExampleParse() {
	_, err := configs.Parse("plant.yaml", []byte(`
model:
  halflife: 2 days
  alpha: 0.01
alerts:
  on_delay: {n: 4, m: 2}
`))
	fmt.Println(err)
	// Output:
	// configs: 2 problem(s):
	// plant.yaml:3:13: model.halflife: duration "2 days": want e.g. 500ms, 15m, 1h30m or 7d
	// plant.yaml:6:13: alerts.on_delay: n=4 of m=2: want 1 ≤ n ≤ m
}

// ExampleConfig_ModelFor shows how a unit's settings inherit the defaults.
func ExampleConfig_ModelFor() {
	c, err := configs.Parse("plant.yaml", []byte(`
model: {sparsity: "l0:4"}
units:
  - name: boiler
    model: {halflife: 3d}
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	m := c.ModelFor("boiler")
	fmt.Println(m.Sparsity, m.HalfLife, m.Alpha, m.Modes)
	// Output: l0:4 72h0m0s 0.01 auto:0.8
}

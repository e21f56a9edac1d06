package sim

import _ "embed"

// DemoYAML is the shipped demo scenario (configs/scenario-demo.yaml; the copy
// embedded here is kept identical by a test).
//
//go:embed scenario-demo.yaml
var DemoYAML []byte

// Demo returns the parsed demo scenario: an invented utility block of four
// units and 50 channels over three days at 20 s, fault-free for the first
// 24 h, then seven labelled faults.
func Demo() (*Scenario, error) {
	return LoadBytes("scenario-demo.yaml", DemoYAML)
}

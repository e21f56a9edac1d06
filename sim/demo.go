package sim

import _ "embed"

// DemoYAML is the shipped demo scenario (configs/scenario-demo.yaml; the copy
// embedded here is kept identical by a test).
//
//go:embed scenario-demo.yaml
var DemoYAML []byte

// Demo returns the parsed demo scenario: an invented utility block of four
// units and 50 channels over six days at 20 s, fault-free for the four
// normal days before its split, then seven labelled faults in the two
// test days.
func Demo() (*Scenario, error) {
	return LoadBytes("scenario-demo.yaml", DemoYAML)
}

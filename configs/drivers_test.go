package configs

import (
	"strings"
	"testing"
)

// TestDriversValidation: units[].state, state_bands and context are
// checked with their key paths.
func TestDriversValidation(t *testing.T) {
	cases := []struct {
		name, yaml, want string
	}{
		{"bands without state", "units: [{name: a, state_bands: [1]}]", "units[0].state_bands: bands without a state channel"},
		{"bands not ascending", "units: [{name: a, state: m.x.s, state_bands: [2, 1]}]", "units[0].state_bands[1]"},
		{"bands with found states", "units: [{name: a, state: auto, state_bands: [1]}]", "not to found states"},
		{"own channel as context", "units: [{name: a, channels: [m.x.p], context: [m.x.p]}]", "units[0].context[0]: channel \"m.x.p\" is one of the unit's own channels"},
		{"context twice", "units: [{name: a, context: [m.x.p, m.x.p]}]", "units[0].context[1]: channel \"m.x.p\" is listed twice"},
		{"empty context", "units: [{name: a, context: [\"\"]}]", "units[0].context[0]: empty channel name"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse("x.yaml", []byte(tc.yaml))
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got %v, want an error containing %q", err, tc.want)
			}
		})
	}
	if _, err := Parse("ok.yaml", []byte("units: [{name: a, state: m.x.s, state_bands: [0.5, 2], context: [n.y.p]}, {name: b, state: auto}]")); err != nil {
		t.Errorf("valid drivers refused: %v", err)
	}
}

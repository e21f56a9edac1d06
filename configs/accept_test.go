package configs

import (
	"strings"
	"testing"
)

// TestAcceptWeight: alerts.accept_weight reaches a unit as written, a unit
// may override it (negative: move the means instead), zero leaves the
// pipeline's default, and a value that is not finite or above 10 is
// refused at its place.
func TestAcceptWeight(t *testing.T) {
	c, err := Parse("w.yaml", []byte(`
alerts: {accept_weight: 0.5}
units:
  - name: boiler
    alerts: {accept_weight: -1}
  - name: air
`))
	if err != nil {
		t.Fatal(err)
	}
	if w := c.AlertsFor("boiler").AcceptWeight; w != -1 {
		t.Errorf("boiler accept_weight = %v, want -1", w)
	}
	if w := c.AlertsFor("air").AcceptWeight; w != 0.5 {
		t.Errorf("air accept_weight = %v, want 0.5", w)
	}
	if c, err = Parse("empty.yaml", nil); err != nil {
		t.Fatal(err)
	}
	if w := c.AlertsFor("any").AcceptWeight; w != 0 {
		t.Errorf("default accept_weight = %v, want 0 (the pipeline's default)", w)
	}
	for _, v := range []string{"20", ".nan", ".inf"} {
		_, err = Parse("n.yaml", []byte("alerts: {accept_weight: "+v+"}\n"))
		if err == nil || !strings.Contains(err.Error(), "alerts.accept_weight") {
			t.Errorf("accept_weight %s: got %v", v, err)
		}
	}
}

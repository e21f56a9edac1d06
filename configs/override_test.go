package configs

import (
	"strings"
	"testing"
)

// TestUnitOverrides: a numeric setting reaches a unit as written, a unit
// may override it (a negative value: the setting's "off" or alternative
// behaviour), zero leaves the engine's default, and a value out of range
// or not finite is refused at its place.
//   - alerts.accept_weight (negative: move the means instead);
//   - model.resolution_floor (negative: no floor).
func TestUnitOverrides(t *testing.T) {
	for _, c := range []struct {
		section, key string
		get          func(c *Config, unit string) float64
		bad          []string // values refused
		badAt        string   // the place named for the first bad value
	}{
		{"alerts", "accept_weight", func(c *Config, u string) float64 { return c.AlertsFor(u).AcceptWeight },
			[]string{"20", ".nan", ".inf"}, ""},
		{"model", "resolution_floor", func(c *Config, u string) float64 { return c.ModelFor(u).ResolutionFloor },
			[]string{".nan"}, "n.yaml:1:27: "},
	} {
		t.Run(c.key, func(t *testing.T) {
			cfg, err := Parse("o.yaml", []byte(c.section+": {"+c.key+": 0.5}\nunits:\n  - name: boiler\n    "+
				c.section+": {"+c.key+": -1}\n  - name: air\n"))
			if err != nil {
				t.Fatal(err)
			}
			if v := c.get(cfg, "boiler"); v != -1 {
				t.Errorf("boiler %s = %v, want -1", c.key, v)
			}
			if v := c.get(cfg, "air"); v != 0.5 {
				t.Errorf("air %s = %v, want 0.5", c.key, v)
			}
			if cfg, err = Parse("empty.yaml", nil); err != nil {
				t.Fatal(err)
			}
			if v := c.get(cfg, "any"); v != 0 {
				t.Errorf("default %s = %v, want 0 (the engine's default)", c.key, v)
			}
			for i, v := range c.bad {
				_, err = Parse("n.yaml", []byte(c.section+": {"+c.key+": "+v+"}\n"))
				want := c.section + "." + c.key
				if i == 0 {
					want = c.badAt + want
				}
				if err == nil || !strings.Contains(err.Error(), want) {
					t.Errorf("%s %s: got %v, want an error naming %q", c.key, v, err, want)
				}
			}
		})
	}
}

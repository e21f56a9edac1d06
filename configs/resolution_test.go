package configs

import (
	"strings"
	"testing"
)

// TestResolutionFloor: model.resolution_floor reaches a unit as written, a
// unit may override it (negative: no floor), zero leaves the engine's
// default, and a value that is not a finite number is refused at its
// place.
func TestResolutionFloor(t *testing.T) {
	c, err := Parse("r.yaml", []byte(`
model: {resolution_floor: 2}
units:
  - name: boiler
    model: {resolution_floor: -1}
  - name: air
`))
	if err != nil {
		t.Fatal(err)
	}
	if f := c.ModelFor("boiler").ResolutionFloor; f != -1 {
		t.Errorf("boiler resolution_floor = %v, want -1", f)
	}
	if f := c.ModelFor("air").ResolutionFloor; f != 2 {
		t.Errorf("air resolution_floor = %v, want 2", f)
	}
	if c, err = Parse("empty.yaml", nil); err != nil {
		t.Fatal(err)
	}
	if f := c.ModelFor("any").ResolutionFloor; f != 0 {
		t.Errorf("default resolution_floor = %v, want 0 (the engine's default)", f)
	}
	_, err = Parse("n.yaml", []byte("model: {resolution_floor: .nan}\n"))
	if err == nil || !strings.Contains(err.Error(), "n.yaml:1:27: model.resolution_floor") {
		t.Errorf("NaN resolution_floor: got %v", err)
	}
}

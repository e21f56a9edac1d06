package sim

import (
	"os"
	"testing"
	"time"
)

// FuzzLoadBytes: no input makes the loader or a short generation panic, and
// every rejected scenario says why with a "sim:" error.
func FuzzLoadBytes(f *testing.F) {
	f.Add(DemoYAML)
	f.Add([]byte(minimal))
	f.Add([]byte(faultBase))
	f.Add([]byte(realism))
	if b, err := os.ReadFile("testdata/bad.yaml"); err == nil {
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := LoadBytes("fuzz.yaml", data)
		if err != nil {
			if len(err.Error()) < 5 || err.Error()[:4] != "sim:" {
				t.Fatalf("error without package prefix: %v", err)
			}
			return
		}
		// Keep generation short whatever the scenario says.
		if s.Samples() > 50 {
			s.Duration = 50 * s.Period
		}
		if len(s.Channels()) > 2000 || s.Period < time.Millisecond {
			return
		}
		g, err := s.NewGenerator()
		if err != nil {
			t.Fatalf("loaded scenario rejected by the generator: %v", err)
		}
		var buf []byte
		for g.Step() {
			if buf, err = g.AppendLines(buf[:0]); err != nil {
				t.Fatalf("encoding a loaded scenario: %v", err)
			}
		}
	})
}

package sim

import (
	"os"
	"strings"
	"testing"
	"time"

	plants "modewatch/configs/realism"
)

// FuzzLoadBytes: no input makes the loader or a short generation panic, and
// every rejected scenario says why with a "sim:" error.
func FuzzLoadBytes(f *testing.F) {
	f.Add(DemoYAML)
	f.Add([]byte(minimal))
	f.Add([]byte(faultBase))
	f.Add([]byte(realism))
	// Plants dated before 1970, one crossing the epoch, and at the start of
	// the range the stream package accepts (frame times are negative Unix
	// nanoseconds there).
	for _, start := range []time.Time{
		time.Date(1969, 12, 31, 23, 59, 0, 0, time.UTC),
		time.Date(1955, 6, 1, 0, 0, 0, 0, time.UTC),
		time.Date(1823, 12, 1, 0, 0, 0, 0, time.UTC),
	} {
		b := strings.Replace(minimal, "2026-01-05T00:00:00Z", start.Format(time.RFC3339), 1)
		b = strings.Replace(b, "2026-01-05T00:30:00Z", start.Add(30*time.Minute).Format(time.RFC3339), 1)
		if _, err := LoadBytes("seed.yaml", []byte(b)); err != nil {
			f.Fatalf("seed starting %v: %v", start, err)
		}
		f.Add([]byte(b))
	}
	for _, p := range plants.Plants() {
		f.Add(p.YAML)
	}
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
			s.Split = time.Time{} // it may lie beyond the shortened end
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

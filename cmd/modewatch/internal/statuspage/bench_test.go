package statuspage

import (
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"testing"
	"time"
)

var benchBytes int

// benchLoad serves the requests of one page load (the shell, its two
// assets, /page/me and the view's data, which is also what the view's
// first event carries) from a plant of units × perUnit channels, reading
// the source afresh each time.
func benchLoad(b *testing.B, units, perUnit int, data string) {
	f := NewFakePlant(units, perUnit)
	pg := New(f, f.Hist, Options{Interval: time.Nanosecond})
	mux := http.NewServeMux()
	pg.Register(mux)
	paths := []string{"/", "/page/assets/page.css", "/page/assets/page.js", "/page/me", data}
	b.ReportAllocs()
	b.ResetTimer()
	n := 0
	for i := 0; i < b.N; i++ {
		n = 0
		for _, p := range paths {
			rec := httptest.NewRecorder()
			mux.ServeHTTP(rec, httptest.NewRequest("GET", p, nil))
			if rec.Code != 200 {
				b.Fatalf("%s: %d", p, rec.Code)
			}
			n += rec.Body.Len()
		}
	}
	benchBytes = n
	b.ReportMetric(float64(n), "bytes/load")
}

// BenchmarkPageLoad: 50 units of 100 channels (5,000 channels). The
// baseline is the JSON of /api/units for the same plant (the views the
// page reads, encoded as the API does).
func BenchmarkPageLoad(b *testing.B) {
	b.Run("api_units_baseline", func(b *testing.B) {
		f := NewFakePlant(50, 100)
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			views := f.Views()
			for k := range views {
				views[k].Modes = nil
			}
			enc := json.NewEncoder(io.Discard)
			enc.SetIndent("", "  ")
			_ = enc.Encode(views)
		}
	})
	b.Run("plant", func(b *testing.B) { benchLoad(b, 50, 100, "/page/data/plant") })
	b.Run("unit_24h", func(b *testing.B) { benchLoad(b, 50, 100, "/page/data/unit/unit03?window=24h") })
	b.Run("incidents", func(b *testing.B) { benchLoad(b, 50, 100, "/page/data/incidents") })
}

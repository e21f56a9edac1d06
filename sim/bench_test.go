package sim

import (
	"compress/gzip"
	"io"
	"testing"
	"time"
)

// allFaultsNow returns the demo with every episode active for the whole run.
func allFaultsNow(t testing.TB) *Scenario {
	s := shortDemo(t, 1000*24*time.Hour)
	for i := range s.Episodes {
		s.Episodes[i].Start, s.Episodes[i].End = s.Start, s.End()
	}
	return s
}

// TestStepAllocs: producing a sample and its line protocol allocates nothing
// once the buffers have grown, with every fault kind active.
func TestStepAllocs(t *testing.T) {
	s := allFaultsNow(t)
	g, err := s.NewGenerator()
	if err != nil {
		t.Fatal(err)
	}
	var buf []byte
	for i := 0; i < 10; i++ {
		g.Step()
		buf, _ = g.AppendLines(buf[:0])
	}
	if a := testing.AllocsPerRun(200, func() {
		g.Step()
		buf, _ = g.AppendLines(buf[:0])
	}); a != 0 {
		t.Errorf("%v allocations per sample, want 0", a)
	}
}

var benchSink []byte

func benchGenerate(b *testing.B, s *Scenario) {
	s.Duration = 1000 * 24 * time.Hour // never runs out within b.N
	g, err := s.NewGenerator()
	if err != nil {
		b.Fatal(err)
	}
	nch := len(s.Channels())
	var buf []byte
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		g.Step()
		buf, _ = g.AppendLines(buf[:0])
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(nch), "ns/value")
	b.ReportMetric(float64(len(buf)), "bytes/sample")
	benchSink = buf
}

// BenchmarkGenerate measures one sample (all channels) of the demo and of the
// 1,000-channel scenario; compare ns/value between the two.
func BenchmarkGenerate(b *testing.B) {
	b.Run("demo-50", func(b *testing.B) { benchGenerate(b, allFaultsNow(b)) })
	b.Run("large-1000", func(b *testing.B) {
		s, err := Load("../configs/scenario-large.yaml")
		if err != nil {
			b.Fatal(err)
		}
		benchGenerate(b, s)
	})
}

// BenchmarkWriteLarge measures the whole streaming path of the large
// scenario per sample (1,000 values), plain and through gzip; compare the two.
func BenchmarkWriteLarge(b *testing.B) {
	for _, gz := range []bool{false, true} {
		name := "plain"
		if gz {
			name = "gzip"
		}
		b.Run(name, func(b *testing.B) {
			s, err := Load("../configs/scenario-large.yaml")
			if err != nil {
				b.Fatal(err)
			}
			s.Duration = time.Duration(b.N) * s.Period
			b.ReportAllocs()
			b.ResetTimer()
			var w io.Writer = io.Discard
			var zw *gzip.Writer
			if gz {
				zw, _ = gzip.NewWriterLevel(w, gzip.BestSpeed)
				w = zw
			}
			if err := s.WriteLineProtocol(w); err != nil {
				b.Fatal(err)
			}
			if zw != nil {
				zw.Close()
			}
		})
	}
}

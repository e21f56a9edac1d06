package stream

import (
	"fmt"
	"math/rand/v2"
	"strconv"
	"testing"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// benchPayload returns nLines lines of nFields float fields each, four assets
// per timestamp, one second apart, values from a seeded generator, and the
// number of values.
func benchPayload(nFields, nLines int) ([]byte, int) {
	rng := rand.New(rand.NewPCG(8, 50))
	var b []byte
	for i := 0; i < nLines; i++ {
		b = append(b, "plant,asset=a0"...)
		b = strconv.AppendInt(b, int64(i%4), 10)
		for f := 0; f < nFields; f++ {
			if f == 0 {
				b = append(b, ' ')
			} else {
				b = append(b, ',')
			}
			b = append(b, 'f')
			b = strconv.AppendInt(b, int64(f), 10)
			b = append(b, '=')
			b = strconv.AppendFloat(b, 100*rng.Float64(), 'f', 3, 64)
		}
		b = append(b, ' ')
		b = strconv.AppendInt(b, t0.Add(time.Duration(i/4)*time.Second).UnixNano(), 10)
		b = append(b, '\n')
	}
	return b, nLines * nFields
}

var benchSink float64

// warmIntake returns an intake with a one-second frame period whose frames
// feed benchSink, warmed up by one Feed of payload with its timestamps
// moved to start at base: the channels are discovered before the timer.
func warmIntake(b *testing.B, payload []byte, base time.Time) (*Intake, *Channels) {
	b.Helper()
	ch, _ := NewChannels(nil, 0)
	in, err := NewIntake(ch, Options{Align: AlignConfig{Period: time.Second}, Log: quiet},
		func(f *Frame) error { benchSink += f.Values[0]; return nil })
	if err != nil {
		b.Fatal(err)
	}
	shiftTimes(payload, base)
	in.Feed("bench", payload)
	return in, ch
}

// BenchmarkIntake measures decode + map + align (Intake.Feed) against a bare
// loop over the same input that only decodes it with the official decoder
// and parses every value (Decoder.NextField, Decoder.Time). Each op is one
// payload of about 200 kB; timestamps are moved forward between ops (outside
// the timer) so no reading is late. The bar: intake ≥ 0.7 × bare throughput.
func BenchmarkIntake(b *testing.B) {
	for _, nf := range []int{50, 500} {
		nLines := 10000 / nf
		payload, nValues := benchPayload(nf, nLines)
		base := t0 // timestamps of payload start here; only ever moved forward
		b.Run(fmt.Sprintf("fields=%d/intake", nf), func(b *testing.B) {
			base = base.Add(time.Duration(nLines/4) * time.Second)
			in, ch := warmIntake(b, payload, base)
			if in.Stats().Rejected() != 0 || ch.Len() != 4*nf {
				b.Fatalf("warm-up: %+v, %d channels", in.Stats(), ch.Len())
			}
			benchShifted(b, payload, &base, nLines, func() {
				if _, err := in.Feed("bench", payload); err != nil {
					b.Fatal(err)
				}
			})
			if st := in.Stats(); st.Late != 0 || st.ClockJumps != 0 || st.Values != uint64(nValues*(b.N+1)) {
				b.Fatalf("late %d clock jumps %d values %d", st.Late, st.ClockJumps, st.Values)
			}
			reportRates(b, nLines, nValues)
		})
		b.Run(fmt.Sprintf("fields=%d/bare", nf), func(b *testing.B) {
			benchShifted(b, payload, &base, nLines, func() { benchSink += bareDecode(b, payload) })
			reportRates(b, nLines, nValues)
		})
	}
}

// bareDecode decodes every entry and parses every value and timestamp.
func bareDecode(b *testing.B, payload []byte) float64 {
	var sum float64
	dec := lineprotocol.NewDecoderWithBytes(payload)
	for dec.Next() {
		if _, err := dec.Measurement(); err != nil {
			b.Fatal(err)
		}
		for {
			k, _, err := dec.NextTag()
			if err != nil {
				b.Fatal(err)
			}
			if k == nil {
				break
			}
		}
		for {
			k, v, err := dec.NextField()
			if err != nil {
				b.Fatal(err)
			}
			if k == nil {
				break
			}
			sum += v.FloatV()
		}
		ts, err := dec.Time(lineprotocol.Nanosecond, time.Time{})
		if err != nil {
			b.Fatal(err)
		}
		sum += float64(ts.Unix())
	}
	return sum
}

func reportRates(b *testing.B, nLines, nValues int) {
	s := b.Elapsed().Seconds()
	if s == 0 {
		return
	}
	b.ReportMetric(float64(nLines*b.N)/s, "lines/s")
	b.ReportMetric(float64(nValues*b.N)/s, "values/s")
}

// benchShifted times run over b.N passes of payload, moving its
// timestamps nLines/4 seconds on from *base before each pass (outside the
// timer) so that no reading is late.
func benchShifted(b *testing.B, payload []byte, base *time.Time, nLines int, run func()) {
	b.SetBytes(int64(len(payload)))
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		b.StopTimer()
		*base = base.Add(time.Duration(nLines/4) * time.Second)
		shiftTimes(payload, *base)
		b.StartTimer()
		run()
	}
	b.StopTimer()
}

// BenchmarkIntakeRatio runs the bare decode loop and the intake on the same
// payload in alternation, timing each, and reports intake throughput as a
// fraction of the bare loop's ("ratio"; the bar is 0.7). Alternating at the
// millisecond scale keeps the ratio meaningful on a shared, noisy machine.
func BenchmarkIntakeRatio(b *testing.B) {
	for _, nf := range []int{50, 500} {
		nLines := 10000 / nf
		payload, nValues := benchPayload(nf, nLines)
		base := t0
		b.Run(fmt.Sprintf("fields=%d", nf), func(b *testing.B) {
			base = base.Add(time.Duration(nLines/4) * time.Second)
			in, _ := warmIntake(b, payload, base)
			var bare, intake time.Duration
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				base = base.Add(time.Duration(nLines/4) * time.Second)
				shiftTimes(payload, base)
				t1 := time.Now()
				benchSink += bareDecode(b, payload)
				t2 := time.Now()
				if _, err := in.Feed("bench", payload); err != nil {
					b.Fatal(err)
				}
				t3 := time.Now()
				bare += t2.Sub(t1)
				intake += t3.Sub(t2)
			}
			b.StopTimer()
			if st := in.Stats(); st.Late != 0 || st.ClockJumps != 0 {
				b.Fatalf("late %d, clock jumps %d", st.Late, st.ClockJumps)
			}
			b.ReportMetric(bare.Seconds()/intake.Seconds(), "ratio")
			b.ReportMetric(float64(nValues*b.N)/intake.Seconds(), "intake-values/s")
			b.ReportMetric(float64(nValues*b.N)/bare.Seconds(), "bare-values/s")
		})
	}
}

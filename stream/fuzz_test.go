package stream

import (
	"context"
	"io"
	"math"
	"testing"
	"time"
)

// FuzzIntake feeds arbitrary bytes through decode → map → align, both as one
// payload (Feed) and as a stream (Read, with a small line limit and a reader
// that splits the input), and checks that nothing panics and the invariants
// hold: frames strictly in time order, Values NaN exactly where Missing,
// every line counted as accepted or rejected. Seeds are in
// testdata/fuzz/FuzzIntake (run by plain go test); they include logs dated
// before 1970, one crossing the epoch, and both ends of MinTime..MaxTime.
func FuzzIntake(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		for _, stream := range []bool{false, true} {
			var last time.Time
			var n int
			check := func(fr *Frame) error {
				if len(fr.Values) != len(fr.Missing) {
					t.Fatalf("values %d, missing %d", len(fr.Values), len(fr.Missing))
				}
				if n > 0 && !fr.Start.After(last) {
					t.Fatalf("frame %v after %v", fr.Start, last)
				}
				for i, v := range fr.Values {
					if math.IsNaN(v) != fr.Missing[i] {
						t.Fatalf("channel %d: %v missing %v", i, v, fr.Missing[i])
					}
				}
				last = fr.Start
				n++
				return nil
			}
			ch, _ := NewChannels(nil, 16)
			in, err := NewIntake(ch, Options{
				Align:        AlignConfig{Period: time.Second, ClockJump: 30 * time.Second},
				MaxLineBytes: 200, Log: quiet, OnError: func(error) {},
			}, check)
			if err != nil {
				t.Fatal(err)
			}
			if stream {
				err = in.Read(context.Background(), "fuzz", &splitReader{data: data})
			} else {
				_, err = in.Feed("fuzz", data)
			}
			if err != nil {
				t.Fatal(err)
			}
			if err := in.Flush(); err != nil {
				t.Fatal(err)
			}
			st := in.Stats()
			if st.Lines != st.Accepted+st.Rejected() {
				t.Fatalf("lines %d != accepted %d + rejected %d", st.Lines, st.Accepted, st.Rejected())
			}
			if st.Frames != uint64(n) || ch.Len() > 16 {
				t.Fatalf("frames %d counted %d, channels %d", n, st.Frames, ch.Len())
			}
			if n > 0 && in.Watermark().Before(last.Add(time.Second/2)) { // frame k ends at k + 0.5 s
				t.Fatalf("watermark %v before the end of frame %v", in.Watermark(), last)
			}
		}
	})
}

// splitReader returns data in reads of varying small sizes.
type splitReader struct {
	data []byte
	k    int
}

func (r *splitReader) Read(p []byte) (int, error) {
	if len(r.data) == 0 {
		return 0, io.EOF
	}
	r.k = r.k%7 + 1
	m := min(len(p), r.k*13, len(r.data))
	copy(p, r.data[:m])
	r.data = r.data[m:]
	return m, nil
}

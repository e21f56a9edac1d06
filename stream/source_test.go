package stream

import (
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// lines returns line protocol for seconds [from, to) of two assets.
func lines(from, to int) string {
	var b strings.Builder
	for s := from; s < to; s++ {
		ts := t0.Add(time.Duration(s) * time.Second).UnixNano()
		fmt.Fprintf(&b, "coolwater,asset=pump2 flow=%d,temp=18.5 %d\n", s, ts)
		fmt.Fprintf(&b, "coolwater,asset=pump3 flow=%di %d\n", 100+s, ts)
	}
	return b.String()
}

func gz(t *testing.T, s string) []byte {
	var b bytes.Buffer
	zw := gzip.NewWriter(&b)
	zw.Write([]byte(s))
	if err := zw.Close(); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestReadFiles: a plain file, a .gz file, a gzip file without the suffix
// and stdin, read in sequence, make one continuous run of frames.
func TestReadFiles(t *testing.T) {
	dir := t.TempDir()
	plain := filepath.Join(dir, "a.lp")
	zipped := filepath.Join(dir, "b.lp.gz")
	sniffed := filepath.Join(dir, "c.log")
	os.WriteFile(plain, []byte(lines(0, 10)), 0o644)
	os.WriteFile(zipped, gz(t, lines(10, 20)), 0o644)
	os.WriteFile(sniffed, gz(t, lines(20, 30)), 0o644)
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}, Stdin: strings.NewReader(lines(30, 40))})
	if err := in.ReadFiles(context.Background(), plain, zipped, sniffed, "-"); err != nil {
		t.Fatal(err)
	}
	in.Flush()
	if len(s.frames) != 40 || len(s.errs) != 0 {
		t.Fatalf("%d frames, errors %v", len(s.frames), s.errs)
	}
	for i, f := range s.frames {
		if !f.Start.Equal(at(float64(i))) || f.Values[0] != float64(i) || f.Values[2] != float64(100+i) || f.Segment != 0 {
			t.Fatalf("frame %d: %+v", i, f)
		}
	}
	if st := in.Stats(); st.Lines != 80 || st.Accepted != 80 || st.Values != 120 {
		t.Errorf("stats %+v", st)
	}

	// A .gz name with plain content is an error naming the file.
	in, _ = newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	bad := filepath.Join(dir, "d.gz")
	os.WriteFile(bad, []byte(lines(0, 1)), 0o644)
	if err := in.ReadFiles(context.Background(), bad); err == nil || !strings.Contains(err.Error(), "d.gz") {
		t.Errorf("error %v", err)
	}
	if err := in.ReadFiles(context.Background(), filepath.Join(dir, "missing")); err == nil {
		t.Error("missing file accepted")
	}
	// A truncated gzip stream: the lines before the cut are kept, the error
	// names the file.
	z := gz(t, lines(0, 200))
	cut := filepath.Join(dir, "cut.gz")
	os.WriteFile(cut, z[:len(z)/2], 0o644)
	in, s = newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}})
	if err := in.ReadFiles(context.Background(), cut); err == nil || !strings.Contains(err.Error(), "cut.gz") {
		t.Errorf("truncated gzip: %v", err)
	}
	in.Flush()
	if len(s.frames) == 0 {
		t.Error("no frames before the cut")
	}
}

// TestReadChunks: lines are decoded in chunks; line numbers of errors stay
// exact across chunk boundaries and a line over MaxLineBytes is skipped and
// reported without losing its neighbours.
func TestReadChunks(t *testing.T) {
	var b strings.Builder
	n, sec := 0, 0
	for ; b.Len() < 3*minChunk; sec++ {
		b.WriteString(lines(sec, sec+1))
		n += 2
	}
	b.WriteString("garbage line\n") // line n+1
	b.WriteString("coolwater,asset=pump2 flow=1,x=" + strings.Repeat("9", 5000) + " 1\n")
	b.WriteString(lines(sec, sec+1))
	in, s := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}, MaxLineBytes: 4096})
	if err := in.Read(context.Background(), "big.lp", strings.NewReader(b.String())); err != nil {
		t.Fatal(err)
	}
	checkErrs(t, s.errs, []errAt{{int64(n + 1), 13, ReasonSyntax}, {int64(n + 2), 4097, ReasonTooLong}}, "big.lp")
	st := in.Stats()
	if st.Accepted != uint64(n+2) || st.RejectedTooLong != 1 || st.RejectedSyntax != 1 {
		t.Errorf("stats %+v", st)
	}
	// A reader that returns one byte at a time gives the same result.
	in2, s2 := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}, MaxLineBytes: 4096})
	tail := b.String()[b.Len()-20000:]
	tail = tail[strings.IndexByte(tail, '\n')+1:]
	if err := in2.Read(context.Background(), "tail.lp", &oneByte{strings.NewReader(tail)}); err != nil {
		t.Fatal(err)
	}
	m := int64(strings.Count(tail, "\n"))
	checkErrs(t, s2.errs, []errAt{{m - 3, 13, ReasonSyntax}, {m - 2, 4097, ReasonTooLong}}, "tail.lp")
}

type oneByte struct{ r *strings.Reader }

func (o *oneByte) Read(p []byte) (int, error) {
	if len(p) > 1 {
		p = p[:1]
	}
	return o.r.Read(p)
}

// TestInferPeriod: the median over channels of each channel's median
// timestamp spacing. Hand-derived: a at 0,1,2,3,4,6,7,8 s (one report
// missing) has spacings 1,1,1,1,2,1,1: median 1 s; b every 2 s: 2 s; c at
// 0, 1.01, 1.99, 3.00, 4.00 s has spacings 1.01, 0.98, 1.01, 1.00: lower
// median 1.00 s. Medians {1, 2, 1} s give 1 s.
func TestInferPeriod(t *testing.T) {
	var b strings.Builder
	add := func(field string, secs ...float64) {
		for _, s := range secs {
			fmt.Fprintf(&b, "u %s=1 %d\n", field, at(s).UnixMilli())
		}
	}
	add("a", 0, 1, 2, 3, 4, 6, 7, 8)
	add("b", 0, 2, 4, 6, 8)
	add("c", 0, 1.01, 1.99, 3.00, 4.00)
	b.WriteString("not line protocol\n")
	p, err := InferPeriod([]byte(b.String()), lineprotocol.Millisecond)
	if err != nil || p != time.Second {
		t.Errorf("period %v, %v; want 1s", p, err)
	}
	if _, err := InferPeriod([]byte("u a=1 5\n"), lineprotocol.Nanosecond); err == nil {
		t.Error("period inferred from one timestamp")
	}
	// Read infers the period when none is configured.
	in, s := newTestIntake(t, Options{Precision: lineprotocol.Millisecond})
	if in.Period() != 0 {
		t.Fatal("period before reading")
	}
	if _, err := in.Feed("x", []byte("u a=1 0\n")); err != ErrNoPeriod {
		t.Errorf("Feed without period: %v", err)
	}
	if err := in.Read(context.Background(), "infer", strings.NewReader(b.String())); err != nil {
		t.Fatal(err)
	}
	in.Flush()
	if in.Period() != time.Second || len(s.frames) != 9 {
		t.Errorf("period %v, %d frames", in.Period(), len(s.frames))
	}
}

// TestFeedAck: a message is acknowledged once the watermark passes its
// newest event time; one that contributed nothing at once; Flush releases
// the rest.
func TestFeedAck(t *testing.T) {
	in, _ := newTestIntake(t, Options{Align: AlignConfig{Period: time.Second}}) // lateness 1 s
	var acked []int
	ack := func(i int) func() error { return func() error { acked = append(acked, i); return nil } }
	in.FeedAck("s", []byte(lines(0, 1)), ack(1)) // t = 0: frame 0 pending
	if len(acked) != 0 || in.Stats().AckPending != 1 {
		t.Fatalf("acked %v", acked)
	}
	in.FeedAck("s", []byte(lines(2, 3)), ack(2)) // t = 2 ≥ 0.5 + 1: frame 0 emitted, watermark t0+0.5
	if fmt.Sprint(acked) != "[1]" || !in.Watermark().Equal(at(0.5)) {
		t.Fatalf("acked %v watermark %v", acked, in.Watermark())
	}
	in.FeedAck("s", []byte(lines(0, 1)), ack(3))        // late: nothing contributed
	in.FeedAck("s", []byte("garbage\n"), ack(4))        // rejected: nothing contributed
	in.FeedAck("s", []byte(lines(3, 4)), func() error { // ack failure counted
		return fmt.Errorf("connection closed")
	})
	in.Flush()
	st := in.Stats()
	if fmt.Sprint(acked) != "[1 3 4 2]" || st.Acked != 4 || st.AckErrors != 1 || st.AckPending != 0 || st.Late != 3 {
		t.Errorf("acked %v stats %+v", acked, st)
	}
}

// TestIntakeAllocs: after warm-up, a payload costs the decoder's two
// allocations (its struct and unescape buffer), whatever its number of lines.
func TestIntakeAllocs(t *testing.T) {
	ch, _ := NewChannels(nil, 0)
	in, err := NewIntake(ch, Options{Align: AlignConfig{Period: time.Second}, Log: quiet}, func(*Frame) error { return nil })
	if err != nil {
		t.Fatal(err)
	}
	payload := []byte(lines(0, 50))
	in.Feed("w", payload)
	ts := t0
	allocs := testing.AllocsPerRun(50, func() {
		ts = ts.Add(100 * time.Second)
		shiftTimes(payload, ts)
		in.Feed("w", payload)
	})
	if allocs > 2 {
		t.Errorf("%v allocs per 100-line payload, want ≤ 2", allocs)
	}
}

// shiftTimes rewrites the 19-digit timestamps at the end of each line of
// payload so that line i of second s is at base + s.
func shiftTimes(payload []byte, base time.Time) {
	var s int64 = -1
	var prev [19]byte
	for i := 0; i < len(payload); {
		j := bytes.IndexByte(payload[i:], '\n')
		if j < 0 {
			return
		}
		ts := payload[i+j-19 : i+j]
		if s < 0 || !bytes.Equal(ts, prev[:]) {
			s++
			copy(prev[:], ts)
		}
		v := base.Add(time.Duration(s) * time.Second).UnixNano()
		for k := 18; k >= 0; k-- {
			ts[k] = byte('0' + v%10)
			v /= 10
		}
		i += j + 1
	}
}

// TestIntakeClockJump: a gap over the limit is reported through
// OnClockJump, counted, and the frames after it carry the next segment.
func TestIntakeClockJump(t *testing.T) {
	var jumps []string
	in, s := newTestIntake(t, Options{
		Align: AlignConfig{Period: time.Second, ClockJump: time.Minute},
		OnClockJump: func(from, to time.Time, seg int) {
			jumps = append(jumps, fmt.Sprintf("%v→%v seg %d", from.Sub(t0), to.Sub(t0), seg))
		},
	})
	in.Feed("j", []byte(lines(0, 3)+lines(3600, 3602)))
	in.Flush()
	st := in.Stats()
	if fmt.Sprint(jumps) != "[2s→1h0m0s seg 1]" || st.Segments() != 2 || st.ClockJumps != 1 || len(s.frames) != 5 {
		t.Fatalf("jumps %v stats %+v frames %d", jumps, st, len(s.frames))
	}
	if s.frames[2].Segment != 0 || s.frames[3].Segment != 1 || !s.frames[3].Start.Equal(at(3600)) {
		t.Errorf("frames %+v", s.frames)
	}
}

// TestHandlerError: a failing frame handler stops Feed with an error that
// wraps ErrHandler and the handler's error; held acks are not released.
func TestHandlerError(t *testing.T) {
	boom := fmt.Errorf("tracker failed")
	ch, _ := NewChannels(nil, 0)
	in, _ := NewIntake(ch, Options{Align: AlignConfig{Period: time.Second, Lateness: -1}, Log: quiet},
		func(*Frame) error { return boom })
	acked := false
	in.FeedAck("h", []byte(lines(0, 1)), func() error { acked = true; return nil })
	_, err := in.Feed("h", []byte(lines(1, 2)))
	if !errors.Is(err, ErrHandler) || !errors.Is(err, boom) || acked {
		t.Errorf("err %v acked %v", err, acked)
	}
}

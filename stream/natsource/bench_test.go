package natsource

import (
	"fmt"
	"testing"
)

// ackCycle runs one message through the tracker as the JetStream handler
// does: Admit, Add, AckThrough with the watermark lagging lag messages.
func ackCycle(tr *AckTracker, msgs []Msg, i, lag int) {
	m := msgs[i%len(msgs)]
	m.Seq = uint64(i + 1)
	if tr.Admit(m) {
		_ = tr.Add(m, sec(i))
	}
	_, _ = tr.AckThrough(sec(i - lag))
}

func newAckBench(n int) (*AckTracker, []Msg) {
	noop := func() error { return nil }
	msgs := make([]Msg, n)
	for i := range msgs {
		msgs[i] = Msg{Ack: noop}
	}
	return NewAckTracker(2*n, Checkpoint{}), msgs
}

// TestAckTrackerNoAllocs guards the per-message path: once warmed up,
// Admit + Add + AckThrough allocate nothing.
func TestAckTrackerNoAllocs(t *testing.T) {
	tr, msgs := newAckBench(64)
	i := 0
	for ; i < 1000; i++ {
		ackCycle(tr, msgs, i, 32)
	}
	allocs := testing.AllocsPerRun(1000, func() {
		ackCycle(tr, msgs, i, 32)
		i++
	})
	if allocs != 0 {
		t.Errorf("%v allocations per message, want 0", allocs)
	}
	// Messages with event second j wait while j ≥ i - lag (t_max < W is
	// strict), so seconds i-32 .. i wait: 33.
	if st := tr.Stats(); st.Waiting != 33 {
		t.Errorf("waiting %d, want 33", st.Waiting)
	}
}

var benchSink int

func benchAck(b *testing.B, lag int) {
	tr, msgs := newAckBench(2 * lag)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		ackCycle(tr, msgs, i, lag)
	}
	benchSink = tr.Stats().Held
}

// BenchmarkAckTracker: cost per message with lag messages waiting for the
// watermark (AckThrough scans the held messages: O(lag) per call).
func BenchmarkAckTracker(b *testing.B) {
	for _, lag := range []int{16, 256, 1024} {
		b.Run(fmt.Sprintf("lag=%d", lag), func(b *testing.B) { benchAck(b, lag) })
	}
}

// BenchmarkAckTrackerPerFrame: the usual case, many messages per frame: the
// watermark moves once every 10 messages.
func BenchmarkAckTrackerPerFrame(b *testing.B) {
	for _, lag := range []int{16, 256, 1024} {
		b.Run(fmt.Sprintf("lag=%d", lag), func(b *testing.B) {
			tr, msgs := newAckBench(2 * lag)
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				m := msgs[i%len(msgs)]
				m.Seq = uint64(i + 1)
				if tr.Admit(m) {
					_ = tr.Add(m, sec(i))
				}
				_, _ = tr.AckThrough(sec((i - lag) / 10 * 10))
			}
			benchSink = tr.Stats().Held
		})
	}
}

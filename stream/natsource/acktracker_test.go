package natsource

import (
	"fmt"
	"slices"
	"testing"
	"time"
)

// ackLog records which sequences were acknowledged, in order.
type ackLog struct {
	acked []uint64
	fail  map[uint64]bool
}

func (l *ackLog) msg(seq uint64) Msg {
	return Msg{Seq: seq, Ack: func() error {
		if l.fail[seq] {
			return fmt.Errorf("ack %d failed", seq)
		}
		l.acked = append(l.acked, seq)
		return nil
	}}
}

var t0 = time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)

func sec(s int) time.Time { return t0.Add(time.Duration(s) * time.Second) }

func TestAckTrackerWatermark(t *testing.T) {
	var l ackLog
	tr := NewAckTracker(8, Checkpoint{})
	// seq → latest event time (s): 1→10, 2→30 (spans a late frame), 3→20, 4→none
	events := map[uint64]time.Time{1: sec(10), 2: sec(30), 3: sec(20), 4: {}}
	for seq := uint64(1); seq <= 4; seq++ {
		m := l.msg(seq)
		if !tr.Admit(m) {
			t.Fatalf("seq %d not admitted", seq)
		}
		if err := tr.Add(m, events[seq]); err != nil {
			t.Fatal(err)
		}
	}
	steps := []struct {
		w        time.Time
		wantN    int
		wantAll  []uint64
		wantSeq  uint64 // checkpoint
		wantHeld int
	}{
		// t_max < W: 10 s is not before 10 s.
		{sec(10), 1, []uint64{4}, 0, 4},
		{sec(11), 1, []uint64{4, 1}, 1, 3}, // 2, 3 waiting; 4 done behind them
		// 3 qualifies before 2: acknowledged out of order, checkpoint stays at 1.
		{sec(25), 1, []uint64{4, 1, 3}, 1, 3},
		// A watermark going back is ignored.
		{sec(5), 0, []uint64{4, 1, 3}, 1, 3},
		{sec(31), 1, []uint64{4, 1, 3, 2}, 4, 0},
	}
	for i, s := range steps {
		n, err := tr.AckThrough(s.w)
		if err != nil {
			t.Fatal(err)
		}
		cp := tr.Checkpoint()
		if n != s.wantN || !slices.Equal(l.acked, s.wantAll) || cp.Seq != s.wantSeq || tr.Stats().Held != s.wantHeld {
			t.Errorf("step %d (W=%v): n=%d acked=%v cp=%d held=%d; want n=%d acked=%v cp=%d held=%d",
				i, s.w.Sub(t0), n, l.acked, cp.Seq, tr.Stats().Held, s.wantN, s.wantAll, s.wantSeq, s.wantHeld)
		}
	}
	if cp := tr.Checkpoint(); !cp.Watermark.Equal(sec(31)) {
		t.Errorf("checkpoint watermark %v, want 31 s", cp.Watermark.Sub(t0))
	}
}

func TestAckTrackerRedelivery(t *testing.T) {
	var old, fresh ackLog
	tr := NewAckTracker(8, Checkpoint{Seq: 10}) // resumed: 1..10 processed
	// Below the checkpoint: dropped and acknowledged again.
	if tr.Admit(fresh.msg(7)) {
		t.Error("seq 7 admitted below checkpoint 10")
	}
	for _, seq := range []uint64{11, 12} {
		m := old.msg(seq)
		if !tr.Admit(m) {
			t.Fatalf("seq %d not admitted", seq)
		}
		if err := tr.Add(m, sec(int(seq))); err != nil {
			t.Fatal(err)
		}
	}
	// 12 is redelivered while waiting: dropped, its newer handle kept.
	if tr.Admit(fresh.msg(12)) {
		t.Error("waiting seq 12 admitted twice")
	}
	// 14 arrives before 13 (the server redelivers 13 later): both admitted.
	for _, seq := range []uint64{14, 13} {
		m := old.msg(seq)
		if !tr.Admit(m) {
			t.Fatalf("seq %d not admitted", seq)
		}
		if err := tr.Add(m, sec(int(seq))); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := tr.AckThrough(sec(100)); err != nil {
		t.Fatal(err)
	}
	// 11, 13, 14 through the first delivery, 12 through the newest.
	slices.Sort(old.acked)
	if !slices.Equal(old.acked, []uint64{11, 13, 14}) || !slices.Equal(fresh.acked, []uint64{7, 12}) {
		t.Errorf("acked old=%v fresh=%v", old.acked, fresh.acked)
	}
	// Processed 12 redelivered once more (acknowledgement lost): re-acknowledged.
	if tr.Admit(fresh.msg(12)) {
		t.Error("processed seq 12 admitted again")
	}
	st := tr.Stats()
	if st.Admitted != 4 || st.Duplicates != 3 || st.Acked != 4 || tr.Checkpoint().Seq != 14 {
		t.Errorf("stats %+v checkpoint %+v", st, tr.Checkpoint())
	}
	// Core messages (Seq 0) pass through untouched.
	if !tr.Admit(Msg{}) || tr.Add(Msg{}, sec(1)) != nil {
		t.Error("core message not passed through")
	}
	if err := tr.Add(old.msg(3), sec(1)); err == nil {
		t.Error("Add below the checkpoint accepted")
	}
}

func TestAckTrackerAckErrors(t *testing.T) {
	l := ackLog{fail: map[uint64]bool{2: true, 3: true}}
	tr := NewAckTracker(8, Checkpoint{})
	for seq := uint64(1); seq <= 3; seq++ {
		m := l.msg(seq)
		tr.Admit(m)
		if err := tr.Add(m, sec(1)); err != nil {
			t.Fatal(err)
		}
	}
	n, err := tr.AckThrough(sec(2))
	if n != 3 || err == nil || err.Error() != "ack 2 failed" {
		t.Errorf("n=%d err=%v, want 3 and the first failure", n, err)
	}
	// Failed acknowledgements are counted; the messages count as processed.
	if st := tr.Stats(); st.AckErrors != 2 || tr.Checkpoint().Seq != 3 {
		t.Errorf("stats %+v, checkpoint %+v", st, tr.Checkpoint())
	}
}

// TestAckTrackerBounded: an unacknowledgeable head (event time far ahead)
// does not let acknowledged messages behind it pile up beyond capacity.
func TestAckTrackerBounded(t *testing.T) {
	var l ackLog
	const capacity = 16
	tr := NewAckTracker(capacity, Checkpoint{})
	head := l.msg(1)
	tr.Admit(head)
	if err := tr.Add(head, sec(1_000_000)); err != nil {
		t.Fatal(err)
	}
	for seq := uint64(2); seq <= 1000; seq++ {
		m := l.msg(seq)
		if !tr.Admit(m) {
			t.Fatalf("seq %d not admitted", seq)
		}
		if err := tr.Add(m, sec(int(seq))); err != nil {
			t.Fatal(err)
		}
		if _, err := tr.AckThrough(sec(int(seq) + 1)); err != nil {
			t.Fatal(err)
		}
		if h := tr.Stats().Held; h > capacity {
			t.Fatalf("held %d > capacity %d at seq %d", h, capacity, seq)
		}
	}
	st := tr.Stats()
	if st.Waiting != 1 || st.Acked != 999 || st.Forgotten == 0 || tr.Checkpoint().Seq != 0 {
		t.Errorf("stats %+v checkpoint %+v", st, tr.Checkpoint())
	}
}

// TestAckTrackerFloor: seq 3 is lost in flight (never seen). Without the
// server's floor the checkpoint passes over it and its redelivery is taken
// for a duplicate; with the floor (stuck at 2 because 3 is unacknowledged on
// the server) it is admitted.
func TestAckTrackerFloor(t *testing.T) {
	for _, tc := range []struct {
		name        string
		synced      bool
		wantCP      uint64 // checkpoint after 1, 2, 4, 5 are acknowledged
		wantAdmit3  bool
		wantFinalCP uint64
	}{
		{"without floor", false, 5, false, 5},
		{"with floor", true, 2, true, 5},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var l ackLog
			tr := NewAckTracker(16, Checkpoint{})
			if tc.synced {
				tr.SetAckFloor(0)
			}
			for _, seq := range []uint64{1, 2, 4, 5} {
				m := l.msg(seq)
				tr.Admit(m)
				if err := tr.Add(m, sec(int(seq))); err != nil {
					t.Fatal(err)
				}
			}
			if _, err := tr.AckThrough(sec(10)); err != nil {
				t.Fatal(err)
			}
			if tc.synced {
				tr.SetAckFloor(2) // the server has 1, 2, 4, 5 acknowledged; 3 pending
			}
			if cp := tr.Checkpoint().Seq; cp != tc.wantCP {
				t.Errorf("checkpoint %d, want %d", cp, tc.wantCP)
			}
			m3 := l.msg(3)
			if got := tr.Admit(m3); got != tc.wantAdmit3 {
				t.Fatalf("redelivered 3 admitted = %v, want %v", got, tc.wantAdmit3)
			}
			if tc.wantAdmit3 {
				if err := tr.Add(m3, sec(3)); err != nil {
					t.Fatal(err)
				}
				if _, err := tr.AckThrough(sec(11)); err != nil {
					t.Fatal(err)
				}
				// A redelivery of 4 (held, acknowledged) is still recognised.
				if tr.Admit(l.msg(4)) {
					t.Error("acknowledged 4 admitted again")
				}
				tr.SetAckFloor(5)
				tr.SetAckFloor(4) // going back is ignored
			}
			if cp := tr.Checkpoint().Seq; cp != tc.wantFinalCP {
				t.Errorf("final checkpoint %d, want %d", cp, tc.wantFinalCP)
			}
			if h := tr.Stats().Held; h != 0 {
				t.Errorf("%d still held", h)
			}
		})
	}
}

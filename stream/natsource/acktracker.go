package natsource

import (
	"fmt"
	"slices"
	"sort"
	"sync"
	"time"
)

// Checkpoint is the consumer-side state to save together with the model
// state, and to give NewAckTracker after a restart.
type Checkpoint struct {
	// Seq is the last processed stream sequence: every message with a
	// stream sequence ≤ Seq has been processed and acknowledged.
	// Redeliveries at or below it are acknowledged again and dropped.
	Seq uint64
	// Watermark is the last watermark given to AckThrough. Frames that
	// start before it were emitted and processed before the checkpoint; after
	// a restart, frames rebuilt from redelivered messages that start before
	// it are incomplete and must be skipped.
	Watermark time.Time
}

type pendingMsg struct {
	seq      uint64
	maxEvent time.Time
	ack      func() error
	done     bool
}

// AckTrackerStats are the counters of an AckTracker.
type AckTrackerStats struct {
	Admitted   uint64 // first deliveries passed on for processing
	Duplicates uint64 // redeliveries dropped
	Acked      uint64 // messages acknowledged
	AckErrors  uint64 // acknowledgements that failed (redelivery will follow and be dropped)
	Forgotten  uint64 // acknowledged messages dropped from memory to stay within capacity
	Waiting    int    // messages held and not yet acknowledged
	Held       int    // messages held (waiting, or acknowledged behind a waiting one)
}

// AckTracker acknowledges JetStream messages once the frames they
// contributed to are processed, and drops redeliveries by stream sequence.
// Use it from the handler goroutine (it is also safe for concurrent use):
//
//	func(m natsource.Msg) error {
//		if !tr.Admit(m) {
//			return nil // redelivery of a message already fed
//		}
//		latest, err := feed(m.Data) // decode → map → align; latest event time in m
//		addErr := tr.Add(m, latest)
//		_, ackErr := tr.AckThrough(aligner.Watermark())
//		return errors.Join(err, addErr, ackErr)
//	}
//
// A message is acknowledged when its latest event time t_max satisfies
//
//	t_max < W
//
// where W is the watermark: every frame ending at or before W has been
// emitted and processed. W should fall on a frame boundary (the end of the
// last emitted frame), so that no frame straddles it. A message without any
// event time (nothing decodable in it) is acknowledged at the next call.
//
// Messages are acknowledged as soon as they qualify, not necessarily in
// sequence order; the checkpoint sequence advances over the contiguous
// acknowledged prefix only, and, once the server's acknowledgement floor is
// known (SetAckFloor, done by JSConsumer when JetStreamConfig.Tracker is
// set), no further than that floor. A message is a redelivery if its sequence is at
// or below the checkpoint sequence or among the messages held: if it is
// still waiting, its newer acknowledgement handle replaces the old one (the
// old delivery may have expired); if it was processed already it is
// acknowledged again. Anything else is admitted, also a sequence below ones
// already seen (the server may redeliver a message it sent but never got an
// acknowledgement for after newer ones).
//
// Memory is bounded: at most capacity messages are held. When that many are
// held, acknowledged ones behind an unacknowledged one or above the floor
// are forgotten (counted in Forgotten); should such a message come again
// it is processed again. Waiting ones are never forgotten; JetStream's MaxAckPending bounds
// their number.
//
// After a restart, resume with the saved Checkpoint: give it to
// JetStreamConfig.Resume, so the server delivers everything after its
// sequence again in order, and skip frames starting before Checkpoint.Watermark,
// which were processed before the checkpoint.
//
// Known limit: a value carried forward by the aligner (the latest value of
// a channel within the staleness limit) is not re-created after a restart if
// the message that brought it is not delivered again; the first frames after
// the restart may then show that channel as missing.
type AckTracker struct {
	mu       sync.Mutex
	pending  []pendingMsg // pending[head:] is live, in increasing seq; acknowledged entries stay until the prefix is popped
	head     int
	capacity int
	last     uint64 // checkpoint sequence
	floor    uint64 // server acknowledgement floor, once synced
	synced   bool   // SetAckFloor was called
	wm       time.Time
	// minWait is at or below the smallest latest event time among the
	// waiting messages (exact after a scan), so AckThrough can skip the scan
	// while the watermark has not passed it.
	minWait time.Time

	admitted, dups, acked, ackErrs, forgotten uint64
}

// NewAckTracker returns a tracker holding at most capacity messages: at
// least the consumer's MaxAckPending, plus, with the floor sync
// (JetStreamConfig.Tracker), the messages acknowledged in one FloorEvery
// (0 means 4·DefaultMaxAckPending), resuming from cp (the zero Checkpoint
// on first start).
func NewAckTracker(capacity int, cp Checkpoint) *AckTracker {
	if capacity <= 0 {
		capacity = 4 * DefaultMaxAckPending
	}
	return &AckTracker{
		pending:  make([]pendingMsg, 0, capacity),
		capacity: capacity,
		last:     cp.Seq,
		wm:       cp.Watermark,
	}
}

// find returns the index in pending of seq, or where it would be inserted.
func (t *AckTracker) find(seq uint64) (int, bool) {
	live := t.pending[t.head:]
	i := sort.Search(len(live), func(i int) bool { return live[i].seq >= seq })
	return t.head + i, i < len(live) && live[i].seq == seq
}

// Admit reports whether m must be processed. It returns false for a
// redelivery (acknowledging it again if it was processed already), true
// otherwise; the caller must then process m and Add it. Core NATS messages
// (Seq 0) are always admitted.
func (t *AckTracker) Admit(m Msg) bool {
	if m.Seq == 0 {
		return true
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	if m.Seq > t.last {
		i, found := t.find(m.Seq)
		if !found {
			t.admitted++
			return true
		}
		if p := &t.pending[i]; !p.done {
			t.dups++
			if m.Ack != nil {
				p.ack = m.Ack
			}
			return false
		}
	}
	// Processed before: the server lost the acknowledgement or did not see
	// it in time; send it again.
	t.dups++
	if m.Ack != nil {
		if err := m.Ack(); err != nil {
			t.ackErrs++
		}
	}
	return false
}

// Add records an admitted message with the latest event time of the
// readings it contained (zero if it had none). Messages with Seq 0 are
// ignored. A message already held gets the new acknowledgement handle.
func (t *AckTracker) Add(m Msg, latest time.Time) error {
	if m.Seq == 0 {
		return nil
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	if m.Seq <= t.last {
		return fmt.Errorf("natsource: ack tracker: stream seq %d is at or below the processed sequence %d (Add without Admit)", m.Seq, t.last)
	}
	i, found := t.find(m.Seq)
	if found {
		p := &t.pending[i]
		if !p.done && m.Ack != nil {
			p.ack = m.Ack
		}
		return nil
	}
	if len(t.pending)-t.head >= t.capacity {
		t.compact()
		i, _ = t.find(m.Seq)
	}
	if t.head > 0 && len(t.pending) == cap(t.pending) {
		n := copy(t.pending, t.pending[t.head:])
		clear(t.pending[n:])
		t.pending = t.pending[:n]
		i -= t.head
		t.head = 0
	}
	if len(t.pending) == t.head || latest.Before(t.minWait) {
		t.minWait = latest
	}
	t.pending = slices.Insert(t.pending, i, pendingMsg{seq: m.Seq, maxEvent: latest, ack: m.Ack})
	return nil
}

// compact forgets acknowledged entries behind the first waiting one.
func (t *AckTracker) compact() {
	w := t.head
	for r := t.head; r < len(t.pending); r++ {
		if t.pending[r].done {
			t.forgotten++
			continue
		}
		t.pending[w] = t.pending[r]
		w++
	}
	clear(t.pending[w:])
	t.pending = t.pending[:w]
}

// AckThrough acknowledges every held message whose latest event time is
// before w, returns how many it acknowledged and the first acknowledgement
// error (the others are counted). A failed acknowledgement is not retried:
// the message was processed, so its redelivery will be dropped and
// acknowledged by Admit. w must not go backwards; an earlier w is ignored.
func (t *AckTracker) AckThrough(w time.Time) (int, error) {
	t.mu.Lock()
	defer t.mu.Unlock()
	if w.Before(t.wm) {
		w = t.wm
	}
	t.wm = w
	if len(t.pending) == t.head || !t.minWait.Before(w) {
		return 0, nil // nothing waiting qualifies
	}
	n := 0
	var first error
	minWait, anyWaiting := time.Time{}, false
	for i := t.head; i < len(t.pending); i++ {
		p := &t.pending[i]
		if p.done {
			continue
		}
		if !p.maxEvent.Before(w) {
			if !anyWaiting || p.maxEvent.Before(minWait) {
				minWait, anyWaiting = p.maxEvent, true
			}
			continue
		}
		p.done = true
		n++
		t.acked++
		if p.ack != nil {
			if err := p.ack(); err != nil {
				t.ackErrs++
				if first == nil {
					first = err
				}
			}
		}
		p.ack = nil
	}
	t.minWait = minWait
	t.pop()
	return n, first
}

// pop drops the acknowledged prefix of the held messages and advances the
// checkpoint sequence over it: without a server floor, over every
// acknowledged message in sequence order; with one (SetAckFloor), only up
// to the floor.
func (t *AckTracker) pop() {
	for t.head < len(t.pending) && t.pending[t.head].done {
		seq := t.pending[t.head].seq
		if t.synced && seq > t.floor {
			break
		}
		t.last = seq
		t.pending[t.head] = pendingMsg{}
		t.head++
	}
	if t.synced && t.floor > t.last {
		t.last = t.floor
	}
	if t.head == len(t.pending) {
		t.pending = t.pending[:0]
		t.head = 0
	}
}

// SetAckFloor tells the tracker the consumer's acknowledgement floor on the
// server (ConsumerInfo.AckFloor.Stream: every message up to it is
// acknowledged there). From the first call on, the checkpoint sequence
// advances only up to the floor, and acknowledged messages above it stay
// held (within capacity) so that their redeliveries are recognised.
//
// Why: a message the server sent but this process never received (lost in
// flight when the connection dropped) is not held here, and is not
// acknowledged on the server, so the floor stops below it. Without the
// floor the checkpoint would pass over it and its redelivery, after
// AckWait, would be taken for an already processed message and dropped.
// JSConsumer calls this itself when JetStreamConfig.Tracker is set. A floor
// lower than a previous one is ignored.
func (t *AckTracker) SetAckFloor(seq uint64) {
	t.mu.Lock()
	defer t.mu.Unlock()
	if !t.synced || seq > t.floor {
		t.floor = max(seq, t.floor)
	}
	t.synced = true
	t.pop()
}

// Checkpoint returns the state to save with the model state.
func (t *AckTracker) Checkpoint() Checkpoint {
	t.mu.Lock()
	defer t.mu.Unlock()
	return Checkpoint{Seq: t.last, Watermark: t.wm}
}

// Stats returns the counters.
func (t *AckTracker) Stats() AckTrackerStats {
	t.mu.Lock()
	defer t.mu.Unlock()
	waiting := 0
	for _, p := range t.pending[t.head:] {
		if !p.done {
			waiting++
		}
	}
	return AckTrackerStats{
		Admitted:   t.admitted,
		Duplicates: t.dups,
		Acked:      t.acked,
		AckErrors:  t.ackErrs,
		Forgotten:  t.forgotten,
		Waiting:    waiting,
		Held:       len(t.pending) - t.head,
	}
}

package natsource

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
)

// Msg is one message handed to a Handler. Data belongs to the handler (it is
// not reused by this package). Seq is the JetStream stream sequence, 0 for
// core NATS. Ack acknowledges the message to JetStream; for core NATS it is
// a no-op returning nil. Ack may be called from any goroutine, later than
// the handler returns.
type Msg struct {
	Subject string
	Data    []byte
	Seq     uint64
	Ack     func() error
}

// Handler processes one message. Sources call it from a single goroutine,
// one message at a time, in arrival order. A returned error is counted and
// logged; delivery continues (core NATS cannot redeliver, and for JetStream
// the message stays unacknowledged unless the caller acknowledges it).
type Handler func(m Msg) error

func noAck() error { return nil }

// Defaults for CoreConfig.
const (
	DefaultQueueMsgs  = 4096
	DefaultQueueBytes = 64 << 20 // 64 MiB
)

// CoreConfig configures a core NATS subscription. The zero value except
// Subjects is valid.
type CoreConfig struct {
	// Subjects to subscribe to; wildcards "*" and ">" allowed. Required.
	Subjects []string
	// QueueGroup, if set, shares the subjects with other members of the
	// group (each message goes to one member).
	QueueGroup string
	// QueueMsgs and QueueBytes bound the messages waiting for the handler;
	// defaults 4096 messages and 64 MiB. A message that would exceed either
	// bound is dropped and counted (CoreStats.Dropped, DroppedBytes).
	QueueMsgs  int
	QueueBytes int
	// OverflowReportEvery rate-limits the warning logged (and the
	// EventError sent through Options.OnEvent) while messages are being
	// dropped; default 10 s. The first drop is always reported.
	OverflowReportEvery time.Duration
}

// libPendingMsgs is the least message bound of the library's own list.
const libPendingMsgs = 65536

// ErrOverflow is reported (wrapped) through Options.OnEvent and the log when
// a core subscription drops messages because its queue is full.
var ErrOverflow = errors.New("natsource: queue full, messages dropped (slow consumer)")

// CoreStats are the counters of a core subscription.
type CoreStats struct {
	Received      uint64 // messages taken off the wire
	Delivered     uint64 // messages handed to the handler
	Dropped       uint64 // messages dropped because a queue was full (ours or the library's, see LibDropped)
	DroppedBytes  uint64 // payload bytes of the messages dropped from our queue
	HandlerErrors uint64 // handler calls that returned an error
	Queued        int    // messages waiting now
	QueuedBytes   int64  // payload bytes waiting now
	LibDropped    uint64 // of Dropped, those dropped in the client library's list (same byte bound) before reaching our queue
}

// CoreSub is a running core NATS subscription; create it with SubscribeCore.
type CoreSub struct {
	conn    *Conn
	log     *slog.Logger
	h       Handler
	subs    []*nats.Subscription
	libDrop []atomic.Uint64 // last count read from each subscription
	queue   chan *nats.Msg
	maxB    int64
	every   time.Duration
	stopped chan struct{} // closed by Stop to tell the worker to finish
	wg      sync.WaitGroup
	once    sync.Once
	stopErr error

	received, delivered, dropped, droppedBytes, handlerErrs atomic.Uint64
	queuedBytes                                             atomic.Int64

	mu         sync.Mutex // guards the overflow report state
	lastReport time.Time
	unreported uint64
}

// SubscribeCore subscribes to cfg.Subjects and calls h for every message
// from one goroutine. It returns once the server has confirmed the
// subscriptions (bounded by ctx). Stop it with Stop.
func (c *Conn) SubscribeCore(ctx context.Context, cfg CoreConfig, h Handler) (*CoreSub, error) {
	if len(cfg.Subjects) == 0 {
		return nil, fmt.Errorf("%w: core: at least one subject is required", ErrConfig)
	}
	if h == nil {
		panic("natsource: SubscribeCore with nil handler")
	}
	if cfg.QueueMsgs < 0 || cfg.QueueBytes < 0 {
		return nil, fmt.Errorf("%w: core: queue bounds must not be negative", ErrConfig)
	}
	qm := cfg.QueueMsgs
	if qm == 0 {
		qm = DefaultQueueMsgs
	}
	qb := cfg.QueueBytes
	if qb == 0 {
		qb = DefaultQueueBytes
	}
	s := &CoreSub{
		conn:    c,
		log:     c.log.With("source", "nats-core"),
		h:       h,
		queue:   make(chan *nats.Msg, qm),
		maxB:    int64(qb),
		every:   orDur(cfg.OverflowReportEvery, 10*time.Second),
		stopped: make(chan struct{}),
	}
	s.libDrop = make([]atomic.Uint64, len(cfg.Subjects))
	for _, subj := range cfg.Subjects {
		var (
			sub *nats.Subscription
			err error
		)
		if cfg.QueueGroup != "" {
			sub, err = c.nc.QueueSubscribe(subj, cfg.QueueGroup, s.enqueue)
		} else {
			sub, err = c.nc.Subscribe(subj, s.enqueue)
		}
		if err != nil {
			s.unsubscribe()
			return nil, fmt.Errorf("natsource: subscribe %q: %w", subj, err)
		}
		// The library keeps its own list between its reader and enqueue,
		// which may grow during a burst even though enqueue never blocks.
		// Fence it too (messages beyond it count as dropped), loose enough
		// in messages not to trip before our queue does.
		_ = sub.SetPendingLimits(max(qm, libPendingMsgs), qb)
		s.subs = append(s.subs, sub)
	}
	if err := c.nc.FlushWithContext(ctx); err != nil {
		s.unsubscribe()
		return nil, fmt.Errorf("natsource: subscribe %v: %w", cfg.Subjects, err)
	}
	if err := c.nc.LastError(); err != nil && errors.Is(err, nats.ErrPermissionViolation) {
		s.unsubscribe()
		return nil, fmt.Errorf("natsource: subscribe %v: %w", cfg.Subjects, err)
	}
	s.wg.Add(1)
	go s.run()
	return s, nil
}

// enqueue runs on the library's delivery goroutine; it must not block.
func (s *CoreSub) enqueue(m *nats.Msg) {
	s.received.Add(1)
	n := int64(len(m.Data))
	if s.queuedBytes.Add(n) > s.maxB {
		s.queuedBytes.Add(-n)
		s.overflow(n)
		return
	}
	select {
	case s.queue <- m:
	default:
		s.queuedBytes.Add(-n)
		s.overflow(n)
	}
}

func (s *CoreSub) overflow(n int64) {
	s.dropped.Add(1)
	s.droppedBytes.Add(uint64(n))
	s.mu.Lock()
	s.unreported++
	now := time.Now()
	if !s.lastReport.IsZero() && now.Sub(s.lastReport) < s.every {
		s.mu.Unlock()
		return
	}
	k := s.unreported
	s.unreported = 0
	s.lastReport = now
	s.mu.Unlock()
	err := fmt.Errorf("%w: %d dropped since last report, %d in total", ErrOverflow, k, s.dropped.Load())
	s.log.Warn("core subscription overflow", "dropped", k, "dropped_total", s.dropped.Load())
	s.conn.asyncErrs.Add(1)
	s.conn.emit(Event{Kind: EventError, Err: err})
}

func (s *CoreSub) run() {
	defer s.wg.Done()
	for {
		select {
		case m := <-s.queue:
			s.deliver(m)
		case <-s.stopped:
			return
		case <-s.conn.closed:
			// Conn.Drain hands us what the library still held; finish
			// the queue, then end (Stop is then only bookkeeping).
			for {
				select {
				case m := <-s.queue:
					s.deliver(m)
				default:
					return
				}
			}
		}
	}
}

func (s *CoreSub) deliver(m *nats.Msg) {
	s.queuedBytes.Add(-int64(len(m.Data)))
	s.delivered.Add(1)
	if err := s.h(Msg{Subject: m.Subject, Data: m.Data, Ack: noAck}); err != nil {
		s.handlerErrs.Add(1)
		s.log.Warn("handler error", "subject", m.Subject, "err", err)
	}
}

func (s *CoreSub) unsubscribe() {
	for _, sub := range s.subs {
		_ = sub.Unsubscribe()
	}
}

// Stop unsubscribes, then hands the messages already queued to the handler
// until the queue is empty or ctx is done (what is left is counted as
// dropped), and waits for the delivery goroutine to end. Idempotent; later
// calls return the first call's result.
func (s *CoreSub) Stop(ctx context.Context) error {
	s.once.Do(func() {
		s.readLibDropped()
		closed := make([]<-chan nats.SubStatus, len(s.subs))
		for i, sub := range s.subs {
			closed[i] = sub.StatusChanged(nats.SubscriptionClosed)
			// Drain lets the library deliver what it already holds to
			// enqueue, then removes the interest.
			if err := sub.Drain(); err != nil && !errors.Is(err, nats.ErrConnectionClosed) &&
				!errors.Is(err, nats.ErrBadSubscription) && !errors.Is(err, nats.ErrConnectionDraining) {
				s.log.Warn("drain subscription", "subject", sub.Subject, "err", err)
			}
		}
		for i, sub := range s.subs {
			select {
			case <-closed[i]:
			case <-s.conn.closed:
			case <-ctx.Done():
				_ = sub.Unsubscribe()
			}
		}
		close(s.stopped)
		s.wg.Wait()
		// Deliver the rest in the caller's goroutine, bounded by ctx.
		for {
			select {
			case m := <-s.queue:
				if ctx.Err() != nil {
					s.queuedBytes.Add(-int64(len(m.Data)))
					s.dropped.Add(1)
					s.droppedBytes.Add(uint64(len(m.Data)))
					continue
				}
				s.deliver(m)
				continue
			default:
			}
			break
		}
		if err := ctx.Err(); err != nil {
			s.stopErr = fmt.Errorf("natsource: stop core subscription: %w", err)
		}
	})
	return s.stopErr
}

// Stats returns the counters.
func (s *CoreSub) Stats() CoreStats {
	st := CoreStats{
		Received:      s.received.Load(),
		Delivered:     s.delivered.Load(),
		Dropped:       s.dropped.Load(),
		DroppedBytes:  s.droppedBytes.Load(),
		HandlerErrors: s.handlerErrs.Load(),
		Queued:        len(s.queue),
		QueuedBytes:   s.queuedBytes.Load(),
	}
	st.LibDropped = s.readLibDropped()
	st.Dropped += st.LibDropped
	return st
}

// readLibDropped refreshes and sums the library's drop counts (they can no
// longer be read once a subscription has ended, so the last value is kept).
func (s *CoreSub) readLibDropped() uint64 {
	var sum uint64
	for i, sub := range s.subs {
		if n, err := sub.Dropped(); err == nil && uint64(n) > s.libDrop[i].Load() {
			s.libDrop[i].Store(uint64(n))
		}
		sum += s.libDrop[i].Load()
	}
	return sum
}

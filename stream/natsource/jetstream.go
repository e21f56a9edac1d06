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
	"github.com/nats-io/nats.go/jetstream"
)

// Defaults for JetStreamConfig.
const (
	DefaultMaxAckPending = 1024
	DefaultAckWait       = 30 * time.Second
	DefaultPullBatch     = 256
)

// JetStreamConfig configures a durable pull consumer. Stream and Durable are
// required; the rest has defaults.
type JetStreamConfig struct {
	// Stream is the JetStream stream name. Required.
	Stream string
	// Durable is the durable consumer name; its position survives restarts
	// of this process and of the server (with file storage). Required.
	Durable string
	// FilterSubjects restricts the consumer to these subjects (wildcards
	// allowed); empty means every subject of the stream.
	FilterSubjects []string

	// CreateStream creates the stream if it does not exist, capturing
	// StreamSubjects. An existing stream is used as it is.
	CreateStream   bool
	StreamSubjects []string      // required with CreateStream
	StreamMemory   bool          // memory instead of file storage (lost on server restart)
	StreamMaxAge   time.Duration // 0: keep forever
	StreamMaxBytes int64         // 0: unlimited

	// BindOnly uses an existing consumer as configured on the server.
	// Without it the durable consumer is created, or updated to the values
	// below, which is what the acknowledgement scheme relies on.
	BindOnly bool
	// DeliverNew starts a newly created consumer at messages published from
	// now on; by default it starts at the first message in the stream.
	DeliverNew bool
	// MaxAckPending is the most messages delivered but not yet
	// acknowledged; the server stops delivering at this bound, which is how
	// intake slows when processing falls behind. Default 1024.
	MaxAckPending int
	// AckWait is how long the server waits for an acknowledgement before
	// delivering the message again; default 30 s. Make it longer than the
	// time a message may wait for the aligner's watermark (frame period +
	// allowed lateness, with margin), or messages are redelivered while
	// still pending (wasteful, and the service skips what it has scored).
	AckWait time.Duration
	// MaxDeliver limits delivery attempts; 0 or negative = unlimited
	// (default: a message is never given up).
	MaxDeliver int
	// NoReset skips the reset of the consumer on start. By default the
	// consumer is reset to its acknowledgement floor, so that the server
	// delivers again, at once and in sequence order, every message after
	// the floor: messages the previous process received but did not
	// acknowledge would otherwise come back only after AckWait, behind
	// newer ones, and their readings would arrive late for the aligner.
	// Messages acknowledged out of order above the floor come again too
	// (at least once). Set NoReset when the durable is shared or the
	// account may not reset consumers (a server without the reset API is
	// detected and treated so). Only one process may consume a durable at
	// a time.
	NoReset bool
	// PullBatch is the number of messages the client buffers ahead of the
	// handler; default 256, never more than MaxAckPending.
	PullBatch int
	// Recreate makes the consumer survive its deletion on the server (an
	// administrator's mistake, a stream deleted with it): the stream is
	// created again when CreateStream allows, the consumer is created
	// again to start after the last message handed to the handler (or at
	// the start of a new stream), and consuming goes on, retried with
	// backoff until it succeeds or Stop. OnRecreate (if set) is called
	// after each recreation, from the delivery goroutine, so the caller
	// can report the gap. Not with BindOnly.
	Recreate   bool
	OnRecreate func(Recreated)
}

// Recreated describes a recreation of the consumer (JetStreamConfig.Recreate).
type Recreated struct {
	// StreamRecreated: the stream was gone and was created again empty;
	// whatever it held and whatever was published meanwhile is lost.
	StreamRecreated bool
	// AfterSeq is the stream sequence of the last message handed to the
	// handler before the deletion; the new consumer starts after it (0:
	// none, or the stream is new).
	AfterSeq uint64
	// Since is when the deletion was noticed; the consumer was recreated
	// at Time.
	Since, Time time.Time
	// Err is the error that reported the deletion.
	Err error
}

func (cfg *JetStreamConfig) validate() error {
	var errs []error
	bad := func(format string, a ...any) {
		errs = append(errs, fmt.Errorf("%w: jetstream: "+format, append([]any{ErrConfig}, a...)...))
	}
	if cfg.Stream == "" {
		bad("stream name is required")
	}
	if cfg.Durable == "" {
		bad("durable consumer name is required")
	}
	if cfg.CreateStream && len(cfg.StreamSubjects) == 0 {
		bad("create_stream needs stream_subjects")
	}
	if cfg.MaxAckPending < 0 || cfg.PullBatch < 0 || cfg.AckWait < 0 || cfg.StreamMaxAge < 0 || cfg.StreamMaxBytes < 0 {
		bad("max_ack_pending, pull_batch, ack_wait, stream_max_age and stream_max_bytes must not be negative")
	}
	return errors.Join(errs...)
}

// JetStreamStats are the counters of a JetStream consumer.
type JetStreamStats struct {
	Delivered     uint64 // messages handed to the handler
	Redelivered   uint64 // of which the server had delivered before (crash, AckWait expiry)
	Acked         uint64 // successful Ack calls
	AckErrors     uint64 // failed Ack calls (the message will come again)
	HandlerErrors uint64
	PullErrors    uint64 // transient errors of the pull iterator (logged)
	DeliveryGaps  uint64 // deliveries that never arrived (lost in flight); redelivered after AckWait
	Recreated     uint64 // consumer recreations after its deletion (Recreate set)
}

// JSConsumer is a running JetStream durable pull consumer; create it with
// ConsumeJetStream.
type JSConsumer struct {
	log  *slog.Logger
	h    Handler
	cons jetstream.Consumer
	it   jetstream.MessagesContext
	wg   sync.WaitGroup
	done chan struct{}
	once sync.Once
	err  error // terminal error, set before done is closed
	// ctx ends background calls (floor queries) at Stop or when run ends.
	ctx    context.Context
	cancel context.CancelFunc

	delivered, redelivered, acked, ackErrs, handlerErrs, pullErrs atomic.Uint64
	gaps                                                          atomic.Uint64
	lastDelivery                                                  uint64 // consumer (delivery) sequence of the last message; run goroutine only

	// Recreation (JetStreamConfig.Recreate).
	js         jetstream.JetStream
	cfg        JetStreamConfig
	cc         jetstream.ConsumerConfig
	batch      int
	mu         sync.Mutex // guards cons, it and stopped
	stopped    bool
	lastSeq    uint64      // stream sequence of the last message handed over; run goroutine only
	down       atomic.Bool // the consumer is gone and being recreated
	downReason atomic.Pointer[string]
	recreated  atomic.Uint64

	// startSeq is the first stream sequence the consumer recreated after
	// its deletion was asked for (0: no such bound); run goroutine only.
	// The server can still deliver earlier messages: a durable consumer
	// created again under its old name may pick up the deleted one's
	// state as last written to disk (e.g. delivered up to 1 when 10 were),
	// overriding the start sequence, and deliver as new what this
	// consumer already handed over.
	startSeq uint64
}

// ConsumeJetStream binds to (or creates, see cfg) the durable pull consumer
// and calls h for every message from one goroutine. The handler receives an
// Ack to call once the message is processed (the service acknowledges once
// a checkpoint holds the frames the message contributed to); until then the
// message counts against MaxAckPending and is delivered again after
// AckWait, or at once after a restart (see NoReset). Setup is bounded by
// ctx.
func (c *Conn) ConsumeJetStream(ctx context.Context, cfg JetStreamConfig, h Handler) (*JSConsumer, error) {
	if err := cfg.validate(); err != nil {
		return nil, err
	}
	if h == nil {
		panic("natsource: ConsumeJetStream with nil handler")
	}
	js, err := jetstream.New(c.nc)
	if err != nil {
		return nil, fmt.Errorf("natsource: jetstream: %w", err)
	}
	if _, err := js.Stream(ctx, cfg.Stream); err != nil {
		if !errors.Is(err, jetstream.ErrStreamNotFound) || !cfg.CreateStream {
			return nil, fmt.Errorf("natsource: jetstream stream %q: %w", cfg.Stream, err)
		}
		sc := jetstream.StreamConfig{
			Name:     cfg.Stream,
			Subjects: cfg.StreamSubjects,
			Storage:  jetstream.FileStorage,
			MaxAge:   cfg.StreamMaxAge,
			MaxBytes: cfg.StreamMaxBytes,
		}
		if cfg.StreamMemory {
			sc.Storage = jetstream.MemoryStorage
		}
		if sc.MaxBytes == 0 {
			sc.MaxBytes = -1
		}
		if _, err := js.CreateStream(ctx, sc); err != nil && !errors.Is(err, jetstream.ErrStreamNameAlreadyInUse) {
			return nil, fmt.Errorf("natsource: create jetstream stream %q: %w", cfg.Stream, err)
		}
	}
	maxAck := cfg.MaxAckPending
	if maxAck == 0 {
		maxAck = DefaultMaxAckPending
	}
	batch := cfg.PullBatch
	if batch == 0 {
		batch = DefaultPullBatch
	}
	batch = min(batch, maxAck)
	var cons jetstream.Consumer
	var cc jetstream.ConsumerConfig
	if cfg.BindOnly {
		cons, err = js.Consumer(ctx, cfg.Stream, cfg.Durable)
	} else {
		cc = jetstream.ConsumerConfig{
			Durable:       cfg.Durable,
			AckPolicy:     jetstream.AckExplicitPolicy,
			AckWait:       orDur(cfg.AckWait, DefaultAckWait),
			MaxAckPending: maxAck,
			MaxDeliver:    -1,
			DeliverPolicy: jetstream.DeliverAllPolicy,
		}
		if cfg.MaxDeliver > 0 {
			cc.MaxDeliver = cfg.MaxDeliver
		}
		if cfg.DeliverNew {
			cc.DeliverPolicy = jetstream.DeliverNewPolicy
		}
		switch len(cfg.FilterSubjects) {
		case 0:
		case 1:
			cc.FilterSubject = cfg.FilterSubjects[0]
		default:
			cc.FilterSubjects = cfg.FilterSubjects
		}
		cons, err = js.CreateOrUpdateConsumer(ctx, cfg.Stream, cc)
	}
	if err != nil {
		return nil, fmt.Errorf("natsource: jetstream consumer %q on stream %q: %w", cfg.Durable, cfg.Stream, err)
	}
	if !cfg.NoReset {
		err := resetConsumer(ctx, js, cfg)
		if errors.Is(err, ErrNoResetAPI) {
			c.log.Warn("the server has no consumer-reset API (NATS server older than the one this was built with); going on without resets: unacknowledged messages come again after AckWait",
				"stream", cfg.Stream, "consumer", cfg.Durable, "err", err)
			cfg.NoReset = true
		} else if err != nil {
			return nil, err
		}
	}
	it, err := cons.Messages(jetstream.PullMaxMessages(batch), jetstream.WithMessagesErrOnMissingHeartbeat(false))
	if err != nil {
		return nil, fmt.Errorf("natsource: jetstream consumer %q: %w", cfg.Durable, err)
	}
	s := &JSConsumer{
		log:  c.log.With("source", "jetstream", "stream", cfg.Stream, "consumer", cfg.Durable),
		h:    h,
		cons: cons,
		it:   it,
		done: make(chan struct{}),
		js:   js, cfg: cfg, cc: cc, batch: batch,
	}
	s.ctx, s.cancel = context.WithCancel(context.Background())
	s.wg.Add(1)
	go s.run()
	return s, nil
}

// consumer returns the current consumer (it changes when recreated).
func (s *JSConsumer) consumer() jetstream.Consumer {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.cons
}

func (s *JSConsumer) iter() jetstream.MessagesContext {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.it
}

// gone reports an error of the message iterator that means the consumer
// no longer exists on the server.
func gone(err error) bool {
	return errors.Is(err, jetstream.ErrConsumerDeleted) || errors.Is(err, jetstream.ErrConsumerNotFound) ||
		errors.Is(err, jetstream.ErrStreamNotFound) || errors.Is(err, jetstream.ErrBadRequest)
}

// Down reports whether the consumer is gone on the server and being
// recreated, and why.
func (s *JSConsumer) Down() (bool, string) {
	if !s.down.Load() {
		return false, ""
	}
	if r := s.downReason.Load(); r != nil {
		return true, *r
	}
	return true, "consumer gone"
}

// recreateSettle is how long recreate waits before its first attempt. The
// server tells a deleted consumer's pull requests, and forgets the stream's
// name, before it has finished tearing the deleted one down: it removes the
// consumer's and the stream's storage by name last. A consumer or stream
// created under the same name meanwhile can start from the deleted
// consumer's state as last written (messages already handed over come
// again, see startSeq) or lose its storage (publishes are never
// acknowledged).
const recreateSettle = time.Second

// recreate creates the stream (if gone and allowed) and the consumer again
// and installs a new message iterator, retrying with backoff until it
// succeeds (true) or the consumer is stopped (false).
func (s *JSConsumer) recreate(cause error) bool {
	since := time.Now()
	reason := fmt.Sprintf("consumer %q of stream %q gone on the server (%v); recreating", s.cfg.Durable, s.cfg.Stream, cause)
	s.downReason.Store(&reason)
	s.down.Store(true)
	defer s.down.Store(false)
	s.log.Error("consumer gone on the server; recreating it", "err", cause, "last_stream_seq", s.lastSeq)
	select {
	case <-s.ctx.Done():
		return false
	case <-time.After(recreateSettle):
	}
	for attempt := 1; ; attempt++ {
		ev, err := s.recreateOnce(cause)
		if err == nil {
			ev.Since, ev.Time = since, time.Now()
			s.recreated.Add(1)
			s.lastDelivery = 0 // delivery sequences restart with the consumer
			s.log.Warn("consumer recreated; readings published while it was gone may be missing",
				"stream_recreated", ev.StreamRecreated, "after_stream_seq", ev.AfterSeq, "gap", ev.Time.Sub(since).Round(time.Millisecond))
			if s.cfg.OnRecreate != nil {
				s.cfg.OnRecreate(ev)
			}
			return true
		}
		s.log.Error("recreating the consumer failed; trying again", "attempt", attempt, "err", err)
		select {
		case <-s.ctx.Done():
			return false
		case <-time.After(backoff(attempt, 250*time.Millisecond, 30*time.Second, 100*time.Millisecond)):
		}
	}
}

func (s *JSConsumer) recreateOnce(cause error) (Recreated, error) {
	ctx, cancel := context.WithTimeout(s.ctx, 10*time.Second)
	defer cancel()
	ev := Recreated{Err: cause, AfterSeq: s.lastSeq}
	if _, err := s.js.Stream(ctx, s.cfg.Stream); err != nil {
		if !errors.Is(err, jetstream.ErrStreamNotFound) || !s.cfg.CreateStream {
			return ev, fmt.Errorf("stream %q: %w", s.cfg.Stream, err)
		}
		sc := jetstream.StreamConfig{Name: s.cfg.Stream, Subjects: s.cfg.StreamSubjects, Storage: jetstream.FileStorage,
			MaxAge: s.cfg.StreamMaxAge, MaxBytes: s.cfg.StreamMaxBytes}
		if s.cfg.StreamMemory {
			sc.Storage = jetstream.MemoryStorage
		}
		if sc.MaxBytes == 0 {
			sc.MaxBytes = -1
		}
		if _, err := s.js.CreateStream(ctx, sc); err != nil && !errors.Is(err, jetstream.ErrStreamNameAlreadyInUse) {
			return ev, fmt.Errorf("create stream %q: %w", s.cfg.Stream, err)
		}
		ev.StreamRecreated, ev.AfterSeq = true, 0
	}
	cc := s.cc
	if ev.AfterSeq > 0 {
		cc.DeliverPolicy, cc.OptStartSeq = jetstream.DeliverByStartSequencePolicy, ev.AfterSeq+1
	}
	cons, err := s.js.CreateOrUpdateConsumer(ctx, s.cfg.Stream, cc)
	if err != nil {
		return ev, fmt.Errorf("create consumer %q: %w", s.cfg.Durable, err)
	}
	it, err := cons.Messages(jetstream.PullMaxMessages(s.batch), jetstream.WithMessagesErrOnMissingHeartbeat(false))
	if err != nil {
		return ev, fmt.Errorf("consume %q: %w", s.cfg.Durable, err)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.stopped {
		it.Stop()
		return ev, errors.New("stopped")
	}
	s.cons, s.it = cons, it
	s.startSeq = 0
	if ev.AfterSeq > 0 {
		s.startSeq = ev.AfterSeq + 1
	}
	if ev.StreamRecreated {
		s.lastSeq = 0
	}
	return ev, nil
}

func (s *JSConsumer) run() {
	defer s.wg.Done()
	defer close(s.done)
	defer s.cancel()
	for {
		jm, err := s.iter().Next()
		if err != nil {
			if errors.Is(err, jetstream.ErrMsgIteratorClosed) {
				s.mu.Lock()
				stopped := s.stopped
				s.mu.Unlock()
				switch {
				case errors.Is(err, jetstream.ErrConnectionClosed) || errors.Is(err, nats.ErrConnectionClosed):
					s.err = fmt.Errorf("natsource: jetstream consumer: %w: %w", ErrClosed, err)
				case !stopped && s.cfg.Recreate && !s.cfg.BindOnly:
					if s.recreate(err) { // closed by the server side: start again
						continue
					}
				}
				return
			}
			if gone(err) {
				if s.cfg.Recreate && !s.cfg.BindOnly {
					s.iter().Stop()
					if s.recreate(err) {
						continue
					}
					return
				}
				s.err = fmt.Errorf("natsource: jetstream consumer: %w", err)
				s.log.Error("consumer stopped", "err", err)
				s.iter().Stop()
				return
			}
			s.pullErrs.Add(1)
			s.log.Warn("pull error", "err", err)
			continue
		}
		md, err := jm.Metadata()
		if err != nil {
			// Not a JetStream message; cannot be acknowledged or ordered.
			s.pullErrs.Add(1)
			s.log.Warn("message without JetStream metadata", "subject", jm.Subject(), "err", err)
			continue
		}
		if seq := md.Sequence.Stream; seq < s.startSeq {
			// Handed over before the consumer was recreated (see
			// startSeq): acknowledged so that it does not come again,
			// and not handed over twice.
			s.log.Warn("message before the recreated consumer's start delivered again (stale consumer state on the server); acknowledged, not handed over",
				"stream_seq", seq, "start_stream_seq", s.startSeq)
			if err := jm.Ack(); err != nil {
				s.ackErrs.Add(1)
			}
			continue
		}
		if md.NumDelivered > 1 {
			s.redelivered.Add(1)
		}
		// Delivery sequences count every delivery, redeliveries included;
		// a jump means deliveries that never arrived (lost in flight while
		// the connection dropped). The server sends them again after
		// AckWait.
		if d := md.Sequence.Consumer; s.lastDelivery != 0 && d > s.lastDelivery+1 {
			k := d - s.lastDelivery - 1
			s.gaps.Add(k)
			s.log.Warn("deliveries missing; the server will send them again after AckWait",
				"missing", k, "after_delivery_seq", s.lastDelivery)
		}
		s.lastDelivery = md.Sequence.Consumer
		s.lastSeq = md.Sequence.Stream
		s.delivered.Add(1)
		m := Msg{Subject: jm.Subject(), Data: jm.Data(), Seq: md.Sequence.Stream, Ack: func() error {
			if err := jm.Ack(); err != nil {
				s.ackErrs.Add(1)
				return fmt.Errorf("natsource: ack stream seq %d: %w", md.Sequence.Stream, err)
			}
			s.acked.Add(1)
			return nil
		}}
		if err := s.h(m); err != nil {
			s.handlerErrs.Add(1)
			s.log.Warn("handler error", "subject", m.Subject, "seq", m.Seq, "err", err)
		}
	}
}

// Stop stops pulling: messages buffered in the client but not yet handed
// to the handler are discarded (they are not acknowledged, so the server
// delivers them again later). It waits for the delivery goroutine, bounded
// by ctx. Acknowledgements already made are flushed by Conn.Drain.
// Idempotent.
func (s *JSConsumer) Stop(ctx context.Context) error {
	s.once.Do(func() {
		s.cancel()
		s.mu.Lock()
		s.stopped = true
		s.it.Stop()
		s.mu.Unlock()
	})
	select {
	case <-s.done:
		s.wg.Wait() // syncFloor ends promptly: its context is cancelled
		return nil
	case <-ctx.Done():
		return fmt.Errorf("natsource: stop jetstream consumer: %w", ctx.Err())
	}
}

// Done is closed when the consumer has stopped (Stop, connection closed, or
// consumer deleted on the server); Err then says why.
func (s *JSConsumer) Done() <-chan struct{} { return s.done }

// Err returns the terminal error after Done is closed; nil after Stop.
func (s *JSConsumer) Err() error {
	select {
	case <-s.done:
		return s.err
	default:
		return nil
	}
}

// Info returns the consumer's state on the server (pending and
// unacknowledged counts, delivered and acknowledged floors).
func (s *JSConsumer) Info(ctx context.Context) (*jetstream.ConsumerInfo, error) {
	ci, err := s.consumer().Info(ctx)
	if err != nil {
		return nil, fmt.Errorf("natsource: consumer info: %w", err)
	}
	return ci, nil
}

// Stats returns the counters.
func (s *JSConsumer) Stats() JetStreamStats {
	return JetStreamStats{
		Delivered:     s.delivered.Load(),
		Redelivered:   s.redelivered.Load(),
		Acked:         s.acked.Load(),
		AckErrors:     s.ackErrs.Load(),
		HandlerErrors: s.handlerErrs.Load(),
		PullErrors:    s.pullErrs.Load(),
		DeliveryGaps:  s.gaps.Load(),
		Recreated:     s.recreated.Load(),
	}
}

// ErrNoResetAPI reports a server that does not answer the consumer-reset
// request (servers before the API existed, e.g. NATS 2.9 and 2.10): the
// request times out or finds no responder. ConsumeJetStream then goes on
// as with NoReset.
var ErrNoResetAPI = errors.New("natsource: the server has no consumer-reset API")

// resetWait bounds a consumer-reset request: a server without the API
// does not answer it.
const resetWait = 5 * time.Second

// resetConsumer makes the server deliver again, at once and in sequence
// order, everything after the consumer's acknowledgement floor.
func resetConsumer(ctx context.Context, js jetstream.JetStream, cfg JetStreamConfig) error {
	ctx, cancel := context.WithTimeout(ctx, resetWait)
	defer cancel()
	_, err := js.ResetConsumer(ctx, cfg.Stream, cfg.Durable)
	if errors.Is(err, context.DeadlineExceeded) || errors.Is(err, nats.ErrNoResponders) || errors.Is(err, nats.ErrTimeout) {
		return fmt.Errorf("%w: reset of consumer %q on stream %q: %w", ErrNoResetAPI, cfg.Durable, cfg.Stream, err)
	}
	if err != nil {
		return fmt.Errorf("natsource: reset jetstream consumer %q on stream %q to its acknowledgement floor (no_reset skips it): %w", cfg.Durable, cfg.Stream, err)
	}
	return nil
}

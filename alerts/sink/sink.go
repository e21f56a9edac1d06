// Package sink delivers alert records to their destinations (JSON lines
// to a file or stdout, a NATS subject, an HTTP webhook) without ever
// blocking the scoring loop and without losing a record across a restart.
//
// Each destination is wrapped in a Sink: Submit appends the message to the
// sink's spool file (a write-ahead log, see below) and offers it to a
// bounded in-memory queue without waiting; one goroutine delivers in
// submission order, retrying with exponential backoff and jitter, and
// reads from the spool whatever did not fit in the queue. The position up
// to which messages are delivered is kept next to the spool, so a restart
// replays exactly the undelivered tail (at least once: a message delivered
// just before a crash may be delivered again; NATS JetStream drops such
// repeats by the Nats-Msg-Id header, other consumers deduplicate by the
// message id "<record id>#<revision>").
//
// Fsync policy (Options.Fsync): FsyncInterval (default) fsyncs the spool
// every FsyncEvery (default 1 s) from a background goroutine, so a process
// crash loses nothing (the data is in the page cache) and a power loss at
// most the last interval; FsyncAlways fsyncs in every Submit (Submit then
// waits for the disk); FsyncNever leaves it to the operating system.
package sink

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"strings"
	"sync"
	"time"
)

// Message is one publication of one alert record.
type Message struct {
	ID   string // deduplication key "<record id>#<revision>"
	Unit string // plant unit, for subject routing
	Data []byte // the record as JSON (one object, no newline)
}

// Deliverer sends messages to one destination.
type Deliverer interface {
	// Deliver returns nil once the destination holds m. An error made with
	// Permanent is not retried (the message goes to the reject file); a
	// RetryAfter error asks for at least that delay.
	Deliver(ctx context.Context, m Message) error
	// Close releases what the deliverer owns.
	Close() error
}

type permanentError struct{ err error }

func (e permanentError) Error() string { return e.err.Error() }
func (e permanentError) Unwrap() error { return e.err }

// Permanent marks err as not worth retrying.
func Permanent(err error) error { return permanentError{err} }

// IsPermanent reports whether err was made with Permanent.
func IsPermanent(err error) bool {
	var p permanentError
	return errors.As(err, &p)
}

type retryAfterError struct {
	err error
	d   time.Duration
}

func (e retryAfterError) Error() string { return e.err.Error() }
func (e retryAfterError) Unwrap() error { return e.err }

// RetryAfter marks err as retryable no sooner than d.
func RetryAfter(err error, d time.Duration) error { return retryAfterError{err, d} }

// Errors of Submit.
var (
	ErrClosed    = errors.New("sink: closed")
	ErrOverflow  = errors.New("sink: queue full and no spool")
	ErrSpoolFull = errors.New("sink: spool full")
)

// FsyncPolicy says when the spool is flushed to disk.
type FsyncPolicy int

const (
	FsyncInterval FsyncPolicy = iota // every FsyncEvery, in the background (default)
	FsyncAlways                      // in every Submit
	FsyncNever                       // left to the operating system
)

// Backoff is the retry schedule: the n-th retry (n = 0, 1, …) waits
//
//	d = min(Max, Initial·2ⁿ),  then uniformly in [d·(1 − Jitter), d]
//
// Retries go on until delivery, a permanent error or Close.
type Backoff struct {
	Initial time.Duration // default 250 ms
	Max     time.Duration // default 30 s
	Jitter  float64       // fraction in [0, 1]; default 0.5
}

// Options configure a Sink. The zero value means defaults.
type Options struct {
	// Name names the sink in logs, counters and spool file names.
	Name string
	// QueueLen is the bounded in-memory queue length. Default 1024.
	QueueLen int
	// SpoolDir keeps the spool; empty means no spool: messages that do
	// not fit the queue are dropped (counted), and undelivered messages
	// are lost at Close.
	SpoolDir string
	// MaxSpoolBytes bounds the spool; beyond it Submit drops (counted).
	// Default 256 MiB.
	MaxSpoolBytes int64
	Fsync         FsyncPolicy
	FsyncEvery    time.Duration // default 1 s
	Backoff       Backoff
	// AttemptTimeout bounds one Deliver call. Default 10 s.
	AttemptTimeout time.Duration
	// Seed seeds the jitter; 0 picks a random seed.
	Seed uint64
	// Logger; nil discards.
	Logger *slog.Logger
}

// Stats are the counters of a sink.
type Stats struct {
	Submitted  uint64 // messages accepted by Submit
	Delivered  uint64 // delivered (a replay after restart counts again)
	Retries    uint64 // failed attempts that were retried
	SpoolOnly  uint64 // accepted while the queue was full: kept in the spool only
	Dropped    uint64 // refused by Submit (closed, queue full without spool, spool full) or lost at Close without spool
	Rejected   uint64 // permanent failures (written to <name>.rejected when there is a spool directory)
	Corrupt    int64  // bytes of torn spool tail cut off at open
	Pending    int64  // bytes of spool not yet delivered
	Replayed   uint64 // messages read back from the spool
	LastError  string
	Connected  bool // the last attempt succeeded
	QueueDepth int
}

type entry struct {
	m        Message
	off, end int64 // spool offsets (0, 0 without spool)
}

// Sink delivers messages to one Deliverer in order.
type Sink struct {
	d   Deliverer
	o   Options
	log *slog.Logger

	mu      sync.Mutex
	sp      *spool // nil without spool
	next    int64  // delivered up to here (spool offset)
	closed  bool
	dirty   bool
	stats   Stats
	lastErr string
	ok      bool
	rejects *rejectFile
	waiting int // records left in the spool at Close

	q       chan entry
	wake    chan struct{} // an entry went to the spool only
	drain   chan struct{} // Close began: finish what is pending, then stop
	quit    chan struct{} // stop now
	stopCtx context.Context
	stop    context.CancelFunc
	wg      sync.WaitGroup
	once    sync.Once
	cerr    error
	rng     *rand.Rand
}

// New starts a sink around d. With a spool directory the spool is opened
// and anything undelivered from before is replayed first.
func New(d Deliverer, o Options) (*Sink, error) {
	if d == nil {
		return nil, errors.New("sink: nil deliverer")
	}
	if o.Name == "" {
		return nil, errors.New("sink: empty name")
	}
	if strings.ContainsAny(o.Name, `/\`) {
		return nil, fmt.Errorf("sink: name %q: no path separators", o.Name)
	}
	if o.QueueLen <= 0 {
		o.QueueLen = 1024
	}
	if o.MaxSpoolBytes <= 0 {
		o.MaxSpoolBytes = 256 << 20
	}
	if o.FsyncEvery <= 0 {
		o.FsyncEvery = time.Second
	}
	if o.Backoff.Initial <= 0 {
		o.Backoff.Initial = 250 * time.Millisecond
	}
	if o.Backoff.Max <= 0 {
		o.Backoff.Max = 30 * time.Second
	}
	if o.Backoff.Max < o.Backoff.Initial {
		o.Backoff.Max = o.Backoff.Initial
	}
	if o.Backoff.Jitter == 0 {
		o.Backoff.Jitter = 0.5
	}
	if o.Backoff.Jitter < 0 || o.Backoff.Jitter > 1 {
		return nil, fmt.Errorf("sink %s: jitter %v not in [0, 1]", o.Name, o.Backoff.Jitter)
	}
	if o.AttemptTimeout <= 0 {
		o.AttemptTimeout = 10 * time.Second
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	seed := o.Seed
	if seed == 0 {
		seed = rand.Uint64()
	}
	s := &Sink{
		d: d, o: o, log: o.Logger.With("sink", o.Name),
		q: make(chan entry, o.QueueLen), wake: make(chan struct{}, 1),
		drain: make(chan struct{}), quit: make(chan struct{}),
		rng: newRand(seed),
	}
	s.stopCtx, s.stop = context.WithCancel(context.Background())
	if o.SpoolDir != "" {
		sp, off, cut, err := openSpool(o.SpoolDir, o.Name)
		if err != nil {
			return nil, err
		}
		s.sp, s.next = sp, off
		s.stats.Corrupt = cut
		if cut > 0 {
			s.log.Warn("sink: cut a torn tail off the spool", "bytes", cut, "file", sp.path)
		}
		if off < sp.end {
			s.log.Info("sink: replaying spool", "bytes", sp.end-off)
		}
		rf, err := openReject(o.SpoolDir, o.Name)
		if err != nil {
			sp.close()
			return nil, err
		}
		s.rejects = rf
		if o.Fsync == FsyncInterval {
			s.wg.Add(1)
			go s.syncLoop()
		}
	}
	s.wg.Add(1)
	go s.run()
	return s, nil
}

// Submit hands m to the sink without blocking on the destination: it is
// appended to the spool (if any) and offered to the queue. It returns an
// error (and counts a drop) only when m cannot be kept.
func (s *Sink) Submit(m Message) error {
	var line []byte
	if s.sp != nil {
		var err error
		if line, err = encode(m); err != nil {
			s.mu.Lock()
			s.stats.Dropped++
			s.mu.Unlock()
			return err
		}
	}
	s.mu.Lock()
	if s.closed {
		s.stats.Dropped++
		s.mu.Unlock()
		return ErrClosed
	}
	e := entry{m: m}
	if s.sp != nil {
		if s.sp.end-s.next+int64(len(line)) > s.o.MaxSpoolBytes {
			s.stats.Dropped++
			s.mu.Unlock()
			s.log.Error("sink: spool full, record dropped", "id", m.ID, "max_bytes", s.o.MaxSpoolBytes)
			return fmt.Errorf("%w: %s: %d bytes pending", ErrSpoolFull, s.o.Name, s.sp.end-s.next)
		}
		off, end, err := s.sp.append(line)
		if err != nil {
			s.stats.Dropped++
			s.mu.Unlock()
			s.log.Error("sink: spool write failed, record dropped", "id", m.ID, "err", err)
			return err
		}
		e.off, e.end = off, end
		s.dirty = true
		if s.o.Fsync == FsyncAlways {
			if err := s.sp.log.Sync(); err != nil {
				s.log.Error("sink: spool fsync", "err", err)
			}
		}
	}
	s.stats.Submitted++
	select {
	case s.q <- e:
	default:
		if s.sp == nil {
			s.stats.Dropped++
			s.mu.Unlock()
			return fmt.Errorf("%w: %s", ErrOverflow, s.o.Name)
		}
		s.stats.SpoolOnly++
		select {
		case s.wake <- struct{}{}:
		default:
		}
	}
	s.mu.Unlock()
	return nil
}

// Stats returns the counters.
func (s *Sink) Stats() Stats {
	s.mu.Lock()
	defer s.mu.Unlock()
	st := s.stats
	st.LastError, st.Connected = s.lastErr, s.ok
	if s.sp != nil {
		st.Pending = s.sp.end - s.next
	}
	st.QueueDepth = len(s.q)
	return st
}

// Name returns the sink's name.
func (s *Sink) Name() string { return s.o.Name }

// Close stops accepting messages, delivers what is pending until ctx is
// done, then stops the goroutines, records the delivered position and
// closes the spool and the deliverer. Whatever is undelivered stays in the
// spool for the next start: with a spool, a destination whose last attempt
// failed is not waited for, and ctx ending before everything is
// delivered is not an error (Waiting says how many records wait); without
// one it is, and the undelivered records are counted as dropped. Close is
// idempotent; later calls return the first result.
func (s *Sink) Close(ctx context.Context) error {
	s.once.Do(func() {
		s.mu.Lock()
		s.closed = true
		s.mu.Unlock()
		close(s.drain)
		done := make(chan struct{})
		go func() { s.wg.Wait(); close(done) }()
		s.mu.Lock()
		down := s.sp != nil && !s.ok && s.lastErr != ""
		s.mu.Unlock()
		var errs []error
		if down { // the destination is failing and the spool holds the rest: no use waiting
			ctx = canceled
		}
		select {
		case <-done:
		case <-ctx.Done():
			close(s.quit)
			s.stop()
			<-done
			if s.sp == nil { // with a spool, nothing is lost: see below
				errs = append(errs, fmt.Errorf("sink %s: close: %w", s.o.Name, ctx.Err()))
			}
		}
		s.stop()
		s.mu.Lock()
		if s.sp != nil {
			if err := s.sp.writePos(s.next); err != nil {
				errs = append(errs, err)
			}
			if err := s.sp.sync(); err != nil {
				errs = append(errs, err)
			}
			if p := s.sp.end - s.next; p > 0 {
				s.waiting = s.countSpooled()
				s.log.Warn("sink: closed with undelivered records safe in the spool; they are delivered after the next start",
					"records", s.waiting, "bytes", p)
			}
			errs = append(errs, s.sp.close(), s.rejects.close())
		} else if n := len(s.q); n > 0 {
			s.stats.Dropped += uint64(n)
			s.log.Error("sink: closed with undelivered records and no spool", "lost", n)
		}
		s.mu.Unlock()
		errs = append(errs, s.d.Close())
		s.cerr = errors.Join(errs...)
	})
	return s.cerr
}

// canceled is a context that is done already.
var canceled = func() context.Context {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	return ctx
}()

// countSpooled counts the records in the spool not yet delivered. Called
// under s.mu after the delivery goroutine stopped.
func (s *Sink) countSpooled() int {
	n := 0
	for off := s.next; off < s.sp.end; n++ {
		_, after, err := s.sp.read(off)
		if err != nil || after <= off {
			break
		}
		off = after
	}
	return n
}

// Waiting returns, after Close, how many undelivered records wait in the
// spool for the next start.
func (s *Sink) Waiting() int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.waiting
}

func (s *Sink) syncLoop() {
	defer s.wg.Done()
	t := time.NewTicker(s.o.FsyncEvery)
	defer t.Stop()
	for {
		select {
		case <-t.C:
		case <-s.drain:
			return
		}
		s.mu.Lock()
		d := s.dirty
		s.dirty = false
		s.mu.Unlock()
		if d {
			// Sync outside the lock: Submit never waits for the disk here.
			if err := s.sp.sync(); err != nil {
				s.log.Error("sink: spool fsync", "err", err)
			}
		}
	}
}

// run delivers entries in order until Close.
func (s *Sink) run() {
	defer s.wg.Done()
	var held *entry // popped from the queue ahead of the spool position
	for {
		e, ok := s.nextEntry(&held)
		if !ok {
			return
		}
		if !s.deliver(e) {
			return
		}
	}
}

// nextEntry returns the next entry to deliver: from the queue when its head
// is at the delivered position, otherwise read back from the spool. It
// returns false when the sink is to stop.
func (s *Sink) nextEntry(held **entry) (entry, bool) {
	for {
		select {
		case <-s.quit:
			return entry{}, false
		default:
		}
		if s.sp == nil {
			select {
			case e := <-s.q:
				return e, true
			case <-s.quit:
				return entry{}, false
			case <-s.drain:
				select {
				case e := <-s.q:
					return e, true
				default:
					return entry{}, false
				}
			}
		}
		s.mu.Lock()
		next, end := s.next, s.sp.end
		s.mu.Unlock()
		if *held != nil && (*held).off < next {
			*held = nil
		}
		if next < end {
			if *held == nil {
				select {
				case e := <-s.q:
					if e.off < next {
						continue // delivered already from the spool
					}
					*held = &e
				default:
				}
			}
			if h := *held; h != nil && h.off == next {
				*held = nil
				return *h, true
			}
			// [next, end) is immutable (append-only; only this goroutine
			// resets the log), so it is read without the lock.
			m, after, err := s.sp.read(next)
			if err != nil {
				// The log was validated at open and is only appended to:
				// an error here is an I/O failure. Log and retry later.
				s.log.Error("sink: reading the spool", "offset", next, "err", err)
				if !s.sleep(s.o.Backoff.Max) {
					return entry{}, false
				}
				continue
			}
			s.mu.Lock()
			s.stats.Replayed++
			s.mu.Unlock()
			return entry{m: m, off: next, end: after}, true
		}
		// Nothing pending: compact, then wait.
		s.mu.Lock()
		if s.next == s.sp.end && s.sp.end > 0 && len(s.q) == 0 {
			if err := s.sp.reset(); err != nil {
				s.log.Error("sink: spool reset", "err", err)
			} else {
				s.next = 0
			}
		}
		s.mu.Unlock()
		select {
		case e := <-s.q:
			s.mu.Lock()
			n := s.next
			s.mu.Unlock()
			if e.off < n {
				continue
			}
			*held = &e
		case <-s.wake:
		case <-s.drain:
			s.mu.Lock()
			idle := s.next == s.sp.end && len(s.q) == 0
			s.mu.Unlock()
			if idle {
				return entry{}, false
			}
		case <-s.quit:
			return entry{}, false
		}
	}
}

// deliver sends e, retrying until it is delivered or rejected; it returns
// false if the sink stopped first.
func (s *Sink) deliver(e entry) bool {
	for attempt := 0; ; attempt++ {
		ctx, cancel := context.WithTimeout(s.stopCtx, s.o.AttemptTimeout)
		err := s.d.Deliver(ctx, e.m)
		cancel()
		if err == nil {
			s.mu.Lock()
			s.stats.Delivered++
			s.ok, s.lastErr = true, ""
			s.advance(e)
			s.mu.Unlock()
			return true
		}
		if IsPermanent(err) {
			s.log.Error("sink: record rejected, kept in the reject file", "id", e.m.ID, "err", err)
			s.mu.Lock()
			s.stats.Rejected++
			s.lastErr, s.ok = err.Error(), false
			if s.rejects != nil {
				if werr := s.rejects.write(e.m, err); werr != nil {
					s.log.Error("sink: writing the reject file", "err", werr)
				}
			}
			s.advance(e)
			s.mu.Unlock()
			return true
		}
		s.mu.Lock()
		s.stats.Retries++
		first := s.ok || s.lastErr == ""
		s.ok, s.lastErr = false, err.Error()
		s.mu.Unlock()
		if first {
			s.log.Warn("sink: delivery failed, retrying", "id", e.m.ID, "err", err)
		}
		d := s.backoff(attempt)
		var ra retryAfterError
		if errors.As(err, &ra) && ra.d > d {
			d = min(ra.d, s.o.Backoff.Max)
		}
		if !s.sleep(d) {
			return false
		}
	}
}

// advance records e as done (s.mu held).
func (s *Sink) advance(e entry) {
	if s.sp == nil {
		return
	}
	s.next = e.end
	if err := s.sp.writePos(s.next); err != nil {
		s.log.Error("sink: writing the spool position", "err", err)
	}
	s.dirty = true
}

func (s *Sink) backoff(attempt int) time.Duration {
	b := s.o.Backoff
	d := b.Initial
	for i := 0; i < attempt && d < b.Max; i++ {
		d *= 2
	}
	d = min(d, b.Max)
	s.mu.Lock()
	f := 1 - b.Jitter*s.rng.Float64()
	s.mu.Unlock()
	return time.Duration(float64(d) * f)
}

// sleep waits d unless the sink must stop now.
func (s *Sink) sleep(d time.Duration) bool {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return true
	case <-s.quit:
		return false
	}
}

func newRand(seed uint64) *rand.Rand { return rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15)) }

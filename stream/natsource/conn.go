package natsource

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/nats-io/nats.go"
)

// Defaults applied by Connect to zero-valued Options fields.
const (
	DefaultConnectTimeout   = 5 * time.Second
	DefaultReconnectWait    = 500 * time.Millisecond
	DefaultMaxReconnectWait = 30 * time.Second
	DefaultReconnectJitter  = 250 * time.Millisecond
	DefaultDrainTimeout     = 10 * time.Second
	DefaultName             = "modewatch"
)

// Errors returned (wrapped) by Connect and the sources; test with errors.Is.
var (
	// ErrConfig marks an invalid Options, CoreConfig or JetStreamConfig.
	ErrConfig = errors.New("natsource: invalid configuration")
	// ErrAuth marks a connection the server refused because of its
	// credentials. The nats.go error (nats.ErrAuthorization,
	// nats.ErrAuthExpired, nats.ErrAuthRevoked, nats.ErrAccountAuthExpired)
	// is wrapped as well.
	ErrAuth = errors.New("natsource: server rejected the credentials")
	// ErrClosed is returned when the connection is closed.
	ErrClosed = errors.New("natsource: connection closed")
)

// TLSOptions configures TLS towards the server. Files are PEM encoded.
// Setting any field requires TLS on the connection.
type TLSOptions struct {
	CAFile   string // CA bundle the server certificate must chain to; empty: system roots
	CertFile string // client certificate (mutual TLS); requires KeyFile
	KeyFile  string // private key of CertFile
}

func (t TLSOptions) enabled() bool { return t.CAFile != "" || t.CertFile != "" || t.KeyFile != "" }

// Options configures a connection. The zero value connects to nothing (URLs
// is required) with the defaults documented per field; the service's YAML
// maps onto these fields one to one.
//
// Reconnection uses exponential backoff after every full pass over the
// server list (pass k = 1, 2, ...):
//
//	delay(k) = min(ReconnectWait·2^(k-1), MaxReconnectWait) + U[0, ReconnectJitter)
//
// At most one authentication method may be set: User/Password, Token,
// NKeySeedFile or CredentialsFile.
type Options struct {
	// URLs lists servers, e.g. "nats://10.0.0.5:4222"; tried in random
	// order unless NoRandomize. Required.
	URLs        []string
	NoRandomize bool
	// Name is the client name shown by the server's monitoring; default "modewatch".
	Name string

	User     string
	Password string
	Token    string
	// NKeySeedFile holds a user NKey seed ("SU..."); the server must list
	// the matching public key.
	NKeySeedFile string
	// CredentialsFile is a ".creds" file with a user JWT and NKey seed
	// (decentralised/operator authentication).
	CredentialsFile string

	TLS TLSOptions

	// ConnectTimeout bounds one dial + handshake; default 5 s. A deadline on
	// the ctx given to Connect shortens it.
	ConnectTimeout time.Duration
	// RetryOnFailedConnect makes Connect return at once even if no server is
	// reachable yet; the client keeps trying in the background with the
	// reconnect policy, and the Connected event reports success.
	RetryOnFailedConnect bool
	// MaxReconnects is the number of reconnect attempts per server before it
	// is given up; 0 or negative means never give up (the default, since a
	// monitor must survive server maintenance).
	MaxReconnects int
	// ReconnectWait is the first backoff delay; default 500 ms.
	ReconnectWait time.Duration
	// MaxReconnectWait caps the backoff; default 30 s.
	MaxReconnectWait time.Duration
	// ReconnectJitter is the upper bound of the uniform random delay added
	// to each backoff, so that many clients do not reconnect in step;
	// default 250 ms. Negative disables jitter.
	ReconnectJitter time.Duration
	// ReconnectBufSize bounds the bytes published while disconnected
	// (this package only publishes acknowledgements); 0 = nats.go default (8 MiB).
	ReconnectBufSize int
	// PingInterval and MaxPingsOut detect a dead server; 0 = nats.go
	// defaults (2 min, 2).
	PingInterval time.Duration
	MaxPingsOut  int
	// DrainTimeout bounds Conn.Drain; default 10 s.
	DrainTimeout time.Duration

	// OnEvent, if set, receives every connection state change and
	// asynchronous error, from a goroutine of the client library. It must
	// not block for long.
	OnEvent func(Event)
}

// Validate reports every problem in o at once, each wrapping ErrConfig.
func (o *Options) Validate() error {
	var errs []error
	bad := func(format string, a ...any) {
		errs = append(errs, fmt.Errorf("%w: "+format, append([]any{ErrConfig}, a...)...))
	}
	if len(o.URLs) == 0 {
		bad("urls: at least one server URL is required")
	}
	for i, u := range o.URLs {
		if strings.TrimSpace(u) == "" {
			bad("urls[%d]: empty URL", i)
		}
	}
	methods := 0
	if o.User != "" || o.Password != "" {
		methods++
		if o.User == "" {
			bad("password given without user")
		}
	}
	if o.Token != "" {
		methods++
	}
	if o.NKeySeedFile != "" {
		methods++
		if err := readable(o.NKeySeedFile); err != nil {
			bad("nkey_seed_file: %v", err)
		}
	}
	if o.CredentialsFile != "" {
		methods++
		if err := readable(o.CredentialsFile); err != nil {
			bad("credentials_file: %v", err)
		}
	}
	if methods > 1 {
		bad("set only one of user/password, token, nkey_seed_file, credentials_file (%d given)", methods)
	}
	if (o.TLS.CertFile == "") != (o.TLS.KeyFile == "") {
		bad("tls: cert_file and key_file must be given together")
	}
	for _, f := range []struct{ name, path string }{
		{"tls.ca_file", o.TLS.CAFile}, {"tls.cert_file", o.TLS.CertFile}, {"tls.key_file", o.TLS.KeyFile},
	} {
		if f.path != "" {
			if err := readable(f.path); err != nil {
				bad("%s: %v", f.name, err)
			}
		}
	}
	for _, d := range []struct {
		name string
		v    time.Duration
	}{
		{"connect_timeout", o.ConnectTimeout}, {"reconnect_wait", o.ReconnectWait},
		{"max_reconnect_wait", o.MaxReconnectWait}, {"ping_interval", o.PingInterval},
		{"drain_timeout", o.DrainTimeout},
	} {
		if d.v < 0 {
			bad("%s: negative duration %v", d.name, d.v)
		}
	}
	if o.ReconnectBufSize < 0 || o.MaxPingsOut < 0 {
		bad("reconnect_buf_size and max_pings_out must not be negative")
	}
	return errors.Join(errs...)
}

func readable(path string) error {
	f, err := os.Open(path)
	if err != nil {
		return err
	}
	return f.Close()
}

func orDur(v, def time.Duration) time.Duration {
	if v == 0 {
		return def
	}
	return v
}

// backoff returns the delay before reconnect pass k (k ≥ 1), see Options.
func backoff(k int, wait, maxWait, jitter time.Duration) time.Duration {
	d := wait
	for i := 1; i < k && d < maxWait; i++ {
		d *= 2
	}
	if d > maxWait {
		d = maxWait
	}
	if jitter > 0 {
		d += rand.N(jitter)
	}
	return d
}

// State is the connection state, for metrics and health checks.
type State int32

// Connection states.
const (
	StateConnecting   State = iota // initial connect not yet done
	StateConnected                 // connected to a server
	StateReconnecting              // lost the server, trying again
	StateClosed                    // closed for good (Close, Drain, or reconnects exhausted)
)

var stateNames = [...]string{StateConnecting: "connecting", StateConnected: "connected",
	StateReconnecting: "reconnecting", StateClosed: "closed"}

// String is the state's name in metrics and logs ("connected"), or
// "State(n)" for a value outside the constants.
func (s State) String() string {
	if s >= 0 && int(s) < len(stateNames) {
		return stateNames[s]
	}
	return fmt.Sprintf("State(%d)", int32(s))
}

// EventKind says what an Event reports.
type EventKind int

// Event kinds.
const (
	EventConnected    EventKind = iota // first connection established
	EventDisconnected                  // connection lost (Err says why, may be nil)
	EventReconnected                   // connection re-established (URL says where)
	EventClosed                        // connection closed for good
	EventError                         // asynchronous error, e.g. a slow consumer or permission error
)

var eventNames = [...]string{EventConnected: "connected", EventDisconnected: "disconnected",
	EventReconnected: "reconnected", EventClosed: "closed", EventError: "error"}

// String is the kind's name in logs ("reconnected"), or "EventKind(n)"
// for a value outside the constants.
func (k EventKind) String() string {
	if k >= 0 && int(k) < len(eventNames) {
		return eventNames[k]
	}
	return fmt.Sprintf("EventKind(%d)", int(k))
}

// Event reports a connection state change or an asynchronous error.
type Event struct {
	Kind    EventKind
	Time    time.Time // local wall clock when observed
	URL     string    // server URL (credentials redacted) where known
	Subject string    // subscription subject for EventError on a subscription
	Err     error
}

// ConnStats are cumulative connection counters.
type ConnStats struct {
	State         State
	URL           string // current server, credentials redacted; empty when not connected
	Disconnects   uint64
	Reconnects    uint64
	AsyncErrors   uint64
	SlowConsumers uint64 // slow-consumer errors reported by the client library
	AuthRejects   uint64 // reconnect attempts the server refused for the credentials
	InMsgs        uint64
	InBytes       uint64
}

// Conn is a NATS connection with state tracking. Create it with Connect.
type Conn struct {
	nc           *nats.Conn
	log          *slog.Logger
	onEvent      func(Event)
	drainTimeout time.Duration

	state         atomic.Int32
	connectedOnce atomic.Bool
	disconnects   atomic.Uint64
	reconnects    atomic.Uint64
	asyncErrs     atomic.Uint64
	slowConsumers atomic.Uint64
	authRejects   atomic.Uint64
	closed        chan struct{}
	closeOnce     sync.Once
}

// Connect validates opts and connects. It returns an error wrapping ErrAuth
// (and the nats.go error) when the server rejects the credentials, ErrConfig
// for invalid options, and otherwise the nats.go error (e.g. nats.ErrNoServers)
// wrapped with the server list. log may be nil.
func Connect(ctx context.Context, opts Options, log *slog.Logger) (*Conn, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	if err := opts.Validate(); err != nil {
		return nil, err
	}
	if err := ctx.Err(); err != nil {
		return nil, fmt.Errorf("natsource: connect: %w", err)
	}
	c := &Conn{
		log:          log.With("component", "nats"),
		onEvent:      opts.OnEvent,
		drainTimeout: orDur(opts.DrainTimeout, DefaultDrainTimeout),
		closed:       make(chan struct{}),
	}
	c.state.Store(int32(StateConnecting))

	no, auth, err := c.natsOptions(ctx, opts)
	if err != nil {
		return nil, err
	}
	urls := strings.Join(opts.URLs, ",")
	nc, err := nats.Connect(urls, no...)
	if err != nil {
		if isAuthErr(err) {
			return nil, fmt.Errorf("%w (auth method: %s; servers %s): %w", ErrAuth, auth, redact(opts.URLs), err)
		}
		return nil, fmt.Errorf("natsource: connect to %s: %w", redact(opts.URLs), err)
	}
	c.nc = nc
	if nc.IsConnected() {
		c.markConnected(nc)
	}
	return c, nil
}

// natsOptions turns opts into nats.go options: timeouts bounded by ctx,
// reconnection with backoff, the handlers that keep c's state and
// counters, and the authentication and TLS options. It also returns the
// name of the authentication method, for errors.
func (c *Conn) natsOptions(ctx context.Context, opts Options) ([]nats.Option, string, error) {
	timeout := orDur(opts.ConnectTimeout, DefaultConnectTimeout)
	if dl, ok := ctx.Deadline(); ok {
		if left := time.Until(dl); left < timeout {
			timeout = max(left, time.Millisecond)
		}
	}
	wait := orDur(opts.ReconnectWait, DefaultReconnectWait)
	maxWait := max(orDur(opts.MaxReconnectWait, DefaultMaxReconnectWait), wait)
	jitter := orDur(opts.ReconnectJitter, DefaultReconnectJitter)
	maxRec := opts.MaxReconnects
	if maxRec <= 0 {
		maxRec = -1
	}
	name := opts.Name
	if name == "" {
		name = DefaultName
	}
	no := []nats.Option{
		nats.Name(name),
		nats.Timeout(timeout),
		nats.MaxReconnects(maxRec),
		nats.CustomReconnectDelay(func(k int) time.Duration { return backoff(k, wait, maxWait, jitter) }),
		nats.DrainTimeout(c.drainTimeout),
		nats.ConnectHandler(func(nc *nats.Conn) { c.markConnected(nc) }),
		nats.DisconnectErrHandler(func(nc *nats.Conn, err error) {
			if nc.IsClosed() {
				return
			}
			c.state.Store(int32(StateReconnecting))
			c.disconnects.Add(1)
			c.log.Warn("disconnected from server", "err", err)
			c.emit(Event{Kind: EventDisconnected, Err: err})
		}),
		nats.ReconnectHandler(func(nc *nats.Conn) {
			c.state.Store(int32(StateConnected))
			c.reconnects.Add(1)
			u := nc.ConnectedUrlRedacted()
			c.log.Info("reconnected", "url", u)
			c.emit(Event{Kind: EventReconnected, URL: u})
		}),
		// A server that rejects the credentials on a reconnect (a password
		// rotated) is tried again with the backoff above, not given up
		// after two rejections as nats.go does by default; each rejection
		// is logged as an error and counted.
		nats.IgnoreAuthErrorAbort(),
		nats.ClosedHandler(func(nc *nats.Conn) { c.markClosed(nc.LastError()) }),
		nats.ErrorHandler(func(nc *nats.Conn, sub *nats.Subscription, err error) {
			c.asyncErrs.Add(1)
			ev := Event{Kind: EventError, Err: err}
			if sub != nil {
				ev.Subject = sub.Subject
			}
			if errors.Is(err, nats.ErrSlowConsumer) {
				c.slowConsumers.Add(1)
			}
			if isAuthErr(err) { // a reconnect refused (see IgnoreAuthErrorAbort above)
				c.authRejects.Add(1)
				c.log.Error("the server rejected the credentials; trying again with backoff", "err", err,
					"rejections", c.authRejects.Load())
				c.emit(ev)
				return
			}
			c.log.Warn("asynchronous error", "subject", ev.Subject, "err", err)
			c.emit(ev)
		}),
	}
	if opts.NoRandomize {
		no = append(no, nats.DontRandomize())
	}
	if opts.RetryOnFailedConnect {
		no = append(no, nats.RetryOnFailedConnect(true))
	}
	if opts.ReconnectBufSize > 0 {
		no = append(no, nats.ReconnectBufSize(opts.ReconnectBufSize))
	}
	if opts.PingInterval > 0 {
		no = append(no, nats.PingInterval(opts.PingInterval))
	}
	if opts.MaxPingsOut > 0 {
		no = append(no, nats.MaxPingsOutstanding(opts.MaxPingsOut))
	}
	auth, err := authOptions(opts, &no)
	if err != nil {
		return nil, "", err
	}
	return no, auth, nil
}

// authOptions appends to no the authentication and TLS options of opts and
// returns the name of the authentication method.
func authOptions(opts Options, no *[]nats.Option) (string, error) {
	auth := "none"
	switch {
	case opts.User != "":
		*no = append(*no, nats.UserInfo(opts.User, opts.Password))
		auth = "user/password"
	case opts.Token != "":
		*no = append(*no, nats.Token(opts.Token))
		auth = "token"
	case opts.NKeySeedFile != "":
		o, err := nats.NkeyOptionFromSeed(opts.NKeySeedFile)
		if err != nil {
			return "", fmt.Errorf("%w: nkey_seed_file %q: %w", ErrConfig, opts.NKeySeedFile, err)
		}
		*no = append(*no, o)
		auth = "nkey"
	case opts.CredentialsFile != "":
		*no = append(*no, nats.UserCredentials(opts.CredentialsFile))
		auth = "credentials file"
	}
	if opts.TLS.enabled() {
		*no = append(*no, nats.Secure())
		if opts.TLS.CAFile != "" {
			*no = append(*no, nats.RootCAs(opts.TLS.CAFile))
		}
		if opts.TLS.CertFile != "" {
			*no = append(*no, nats.ClientCert(opts.TLS.CertFile, opts.TLS.KeyFile))
		}
	}
	return auth, nil
}

func isAuthErr(err error) bool {
	return errors.Is(err, nats.ErrAuthorization) || errors.Is(err, nats.ErrAuthExpired) ||
		errors.Is(err, nats.ErrAuthRevoked) || errors.Is(err, nats.ErrAccountAuthExpired)
}

// redact hides user info in URLs for messages.
func redact(urls []string) string {
	out := make([]string, len(urls))
	for i, u := range urls {
		if at := strings.LastIndexByte(u, '@'); at >= 0 {
			scheme := ""
			if p := strings.Index(u, "://"); p >= 0 && p < at {
				scheme = u[:p+3]
			}
			u = scheme + "***@" + u[at+1:]
		}
		out[i] = u
	}
	return strings.Join(out, ",")
}

func (c *Conn) markConnected(nc *nats.Conn) {
	if !c.connectedOnce.CompareAndSwap(false, true) {
		return
	}
	c.state.Store(int32(StateConnected))
	u := nc.ConnectedUrlRedacted()
	c.log.Info("connected", "url", u)
	c.emit(Event{Kind: EventConnected, URL: u})
}

func (c *Conn) markClosed(err error) {
	c.closeOnce.Do(func() {
		c.state.Store(int32(StateClosed))
		c.log.Info("connection closed", "last_err", err)
		c.emit(Event{Kind: EventClosed, Err: err})
		close(c.closed)
	})
}

func (c *Conn) emit(e Event) {
	if c.onEvent == nil {
		return
	}
	e.Time = time.Now()
	c.onEvent(e)
}

// NATS returns the underlying nats.go connection (for publishing, e.g. by
// the simulator); do not close it directly, use Close or Drain.
func (c *Conn) NATS() *nats.Conn { return c.nc }

// State returns the current connection state.
func (c *Conn) State() State { return State(c.state.Load()) }

// Closed returns a channel closed once the connection is closed for good.
func (c *Conn) Closed() <-chan struct{} { return c.closed }

// Stats returns the cumulative counters.
func (c *Conn) Stats() ConnStats {
	s := c.nc.Stats()
	st := ConnStats{
		State:         c.State(),
		Disconnects:   c.disconnects.Load(),
		Reconnects:    c.reconnects.Load(),
		AsyncErrors:   c.asyncErrs.Load(),
		SlowConsumers: c.slowConsumers.Load(),
		AuthRejects:   c.authRejects.Load(),
		InMsgs:        s.InMsgs,
		InBytes:       s.InBytes,
	}
	if c.nc.IsConnected() {
		st.URL = c.nc.ConnectedUrlRedacted()
	}
	return st
}

// Drain gracefully closes the connection: subscriptions stop receiving,
// messages already received are handed to their handlers, pending
// publications (acknowledgements) are flushed, then the connection closes.
// It waits until closed or ctx is done (then it closes at once and returns
// ctx's error). Safe to call more than once and after Close.
func (c *Conn) Drain(ctx context.Context) error {
	if c.nc.IsClosed() {
		<-c.closed
		return nil
	}
	if err := c.nc.Drain(); err != nil && !errors.Is(err, nats.ErrConnectionClosed) {
		c.nc.Close()
		<-c.closed
		return fmt.Errorf("natsource: drain: %w", err)
	}
	select {
	case <-c.closed:
		return nil
	case <-ctx.Done():
		c.nc.Close()
		<-c.closed
		return fmt.Errorf("natsource: drain: %w", ctx.Err())
	}
}

// Close closes the connection at once, dropping buffered messages. Idempotent.
func (c *Conn) Close() {
	c.nc.Close()
	<-c.closed
}

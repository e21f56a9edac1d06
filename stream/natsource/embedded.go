package natsource

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"log/slog"
	"sync"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nkeys"
)

// EmbeddedConfig configures an in-process nats-server. The zero value is
// invalid only because StoreDir is required while JetStream is on.
type EmbeddedConfig struct {
	// Host to listen on; default "127.0.0.1" (loopback only).
	Host string
	// Port to listen on; 0 means the NATS default 4222, -1 a random free port.
	Port int
	// NoJetStream turns JetStream off (it is on by default).
	NoJetStream bool
	// StoreDir is where JetStream keeps its streams (inside the service's
	// data directory). Required with JetStream.
	StoreDir string
	// MaxMemory and MaxStore limit JetStream memory and file storage in
	// bytes; 0 lets the server choose (a share of RAM and disk).
	MaxMemory int64
	MaxStore  int64
	// ServerName names the server in logs and monitoring; default "modewatch-embedded".
	ServerName string
	// Debug passes the server's debug messages to the log at debug level.
	Debug bool
	// Users, when given, make the server require authentication: each
	// user connects with a password (plain or a bcrypt hash "$2a$…") or an
	// NKey and may publish and subscribe only where its permissions allow.
	// A service user (ServiceUser) with every permission is added.
	Users []EmbeddedUser
}

// EmbeddedUser is a user of the embedded server.
type EmbeddedUser struct {
	// Name is the user name (password users) or a label (NKey users).
	Name string
	// Password, plain or bcrypt-hashed ("$2a$…", compared by the
	// server); or NKey, the user's public key ("U…"). Exactly one.
	Password string
	NKey     string
	// Publish and Subscribe list the subjects (wildcards allowed) the
	// user may publish to and subscribe to; empty allows none.
	Publish, Subscribe []string
}

// ServiceUserName is the user the service connects as when the embedded
// server has users; its password is made at random at every start.
const ServiceUserName = "modewatch-service"

// Embedded is a nats-server running inside this process.
type Embedded struct {
	srv     *server.Server
	once    sync.Once
	svcPass string
}

// StartEmbedded starts the server and waits until it accepts connections,
// at most until ctx is done (default 10 s when ctx has no deadline).
// Server messages go to log (nil discards them).
func StartEmbedded(ctx context.Context, cfg EmbeddedConfig, log *slog.Logger) (*Embedded, error) {
	if !cfg.NoJetStream && cfg.StoreDir == "" {
		return nil, fmt.Errorf("%w: embedded server: store_dir is required with JetStream", ErrConfig)
	}
	if cfg.Port < -1 || cfg.Port > 65535 {
		return nil, fmt.Errorf("%w: embedded server: port %d out of range (-1 = random)", ErrConfig, cfg.Port)
	}
	host := cfg.Host
	if host == "" {
		host = "127.0.0.1"
	}
	name := cfg.ServerName
	if name == "" {
		name = "modewatch-embedded"
	}
	opts := &server.Options{
		ServerName:         name,
		Host:               host,
		Port:               cfg.Port,
		NoSigs:             true,
		JetStream:          !cfg.NoJetStream,
		StoreDir:           cfg.StoreDir,
		JetStreamMaxMemory: cfg.MaxMemory,
		JetStreamMaxStore:  cfg.MaxStore,
		Debug:              cfg.Debug,
	}
	if log == nil {
		opts.NoLog = true
	}
	var svcPass string
	if len(cfg.Users) > 0 {
		var err error
		if svcPass, err = addUsers(opts, cfg.Users); err != nil {
			return nil, err
		}
	}
	srv, err := server.NewServer(opts)
	if err != nil {
		return nil, fmt.Errorf("natsource: embedded server: %w", err)
	}
	if log != nil {
		srv.SetLoggerV2(&serverLog{log: log.With("component", "nats-server")}, cfg.Debug, false, false)
	}
	go srv.Start()
	wait := 10 * time.Second
	if dl, ok := ctx.Deadline(); ok {
		wait = time.Until(dl)
	}
	if !srv.ReadyForConnections(wait) {
		srv.Shutdown()
		srv.WaitForShutdown()
		return nil, fmt.Errorf("natsource: embedded server on %s:%d not ready within %v (port in use or store_dir %q unusable?)",
			host, cfg.Port, wait.Round(time.Millisecond), cfg.StoreDir)
	}
	return &Embedded{srv: srv, svcPass: svcPass}, nil
}

// addUsers puts the users and the service user into opts and returns the
// service user's password.
func addUsers(opts *server.Options, users []EmbeddedUser) (string, error) {
	perms := func(u EmbeddedUser) *server.Permissions {
		return &server.Permissions{
			Publish:   &server.SubjectPermission{Allow: append([]string{}, u.Publish...)},
			Subscribe: &server.SubjectPermission{Allow: append([]string{}, u.Subscribe...)},
		}
	}
	for _, u := range users {
		switch {
		case u.Name == ServiceUserName:
			return "", fmt.Errorf("%w: embedded server: user name %q is reserved for the service", ErrConfig, u.Name)
		case (u.Password == "") == (u.NKey == ""):
			return "", fmt.Errorf("%w: embedded server: user %q needs exactly one of password and nkey", ErrConfig, u.Name)
		case u.NKey != "":
			if !nkeys.IsValidPublicUserKey(u.NKey) {
				return "", fmt.Errorf("%w: embedded server: user %q: %q is not an NKey user public key (U…)", ErrConfig, u.Name, u.NKey)
			}
			opts.Nkeys = append(opts.Nkeys, &server.NkeyUser{Nkey: u.NKey, Permissions: perms(u)})
		default:
			opts.Users = append(opts.Users, &server.User{Username: u.Name, Password: u.Password, Permissions: perms(u)})
		}
	}
	var b [24]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", err
	}
	pass := hex.EncodeToString(b[:])
	opts.Users = append(opts.Users, &server.User{Username: ServiceUserName, Password: pass}) // no permissions: everything
	return pass, nil
}

// ServiceUser returns the user and password the service connects with
// when the server has users ("", "" otherwise).
func (e *Embedded) ServiceUser() (user, password string) {
	if e.svcPass == "" {
		return "", ""
	}
	return ServiceUserName, e.svcPass
}

// ClientURL returns the URL clients connect to, e.g. "nats://127.0.0.1:4222".
func (e *Embedded) ClientURL() string { return e.srv.ClientURL() }

// Server returns the underlying server (for tests and monitoring).
func (e *Embedded) Server() *server.Server { return e.srv }

// Shutdown stops the server and waits until it has stopped; JetStream data
// is flushed to StoreDir. Idempotent.
func (e *Embedded) Shutdown() {
	e.once.Do(func() {
		e.srv.Shutdown()
		e.srv.WaitForShutdown()
	})
}

// serverLog adapts slog to the server's Logger interface.
type serverLog struct{ log *slog.Logger }

func (l *serverLog) Noticef(format string, v ...any) { l.log.Info(fmt.Sprintf(format, v...)) }
func (l *serverLog) Warnf(format string, v ...any)   { l.log.Warn(fmt.Sprintf(format, v...)) }
func (l *serverLog) Fatalf(format string, v ...any)  { l.log.Error(fmt.Sprintf(format, v...)) }
func (l *serverLog) Errorf(format string, v ...any)  { l.log.Error(fmt.Sprintf(format, v...)) }
func (l *serverLog) Debugf(format string, v ...any)  { l.log.Debug(fmt.Sprintf(format, v...)) }
func (l *serverLog) Tracef(format string, v ...any)  { l.log.Debug(fmt.Sprintf(format, v...)) }

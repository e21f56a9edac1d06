// Package access decides who may use the HTTP API and the status page:
// bearer tokens stored as hashes, client certificates verified against a
// CA, and two roles, read and write. Wrap a handler with [Guard.Read] or
// [Guard.Write]; the handler finds the caller with [From].
//
// Without any authentication configured (loopback, or open_access) every
// caller is let in with the write role and no name: commands then carry
// the "by" their body gives, as before authentication existed.
package access

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"crypto/tls"
	"crypto/x509"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"os"
	"strings"

	"modewatch/configs"
)

// Role is what a caller may do.
type Role int

// Roles, in increasing power.
const (
	None  Role = iota
	Read       // GET endpoints and pages
	Write      // also commands and checkpoint uploads
)

func (r Role) String() string {
	switch r {
	case Read:
		return configs.RoleRead
	case Write:
		return configs.RoleWrite
	}
	return "none"
}

func parseRole(s string) Role {
	switch s {
	case configs.RoleRead:
		return Read
	case configs.RoleWrite:
		return Write
	}
	return None
}

// Identity is an authenticated caller.
type Identity struct {
	// Name is the token's or certificate's name; "" when the API has no
	// authentication (the command's own "by" is used then).
	Name string
	Role Role
	// Via says how: "token", "certificate" or "open".
	Via string
}

type token struct {
	hash [sha256.Size]byte
	name string
	role Role
}

// Guard authenticates requests. The zero Guard refuses everything; make
// one with [New].
type Guard struct {
	tokens []token
	certs  map[string]Role // certificate common name → role
	open   bool
}

// New builds the guard of the HTTP configuration h, reading its tokens
// file. With no tokens and no client certificates the guard is open.
func New(h configs.HTTP) (*Guard, error) {
	g := &Guard{certs: map[string]Role{}}
	all := append([]configs.Token(nil), h.Tokens...)
	if h.TokensFile != "" {
		more, err := configs.ReadTokensFile(h.TokensFile)
		if err != nil {
			return nil, fmt.Errorf("access: tokens file: %w", err)
		}
		all = append(all, more...)
	}
	for _, t := range all {
		if err := configs.CheckToken(t); err != nil {
			return nil, fmt.Errorf("access: token %q: %w", t.Name, err)
		}
		b, _ := hex.DecodeString(strings.TrimPrefix(t.Hash, configs.TokenHashPrefix))
		var k token
		copy(k.hash[:], b)
		k.name, k.role = t.Name, parseRole(t.Role)
		g.tokens = append(g.tokens, k)
	}
	if h.TLS.ClientCA != "" {
		for _, c := range h.Clients {
			g.certs[c.Name] = parseRole(c.Role)
		}
	}
	g.open = len(g.tokens) == 0 && len(g.certs) == 0
	return g, nil
}

// Open reports whether the guard lets everyone in (no authentication).
func (g *Guard) Open() bool { return g.open }

// Errors of Identify.
var (
	ErrNoCredentials  = errors.New("access: credentials required (Authorization: Bearer <token>, or a client certificate)")
	ErrBadCredentials = errors.New("access: unknown token or certificate")
)

// Identify returns the caller of r: a verified client certificate named in
// the configuration first, else a bearer token. It fails with
// [ErrNoCredentials] or [ErrBadCredentials].
func (g *Guard) Identify(r *http.Request) (Identity, error) {
	if g.open {
		return Identity{Role: Write, Via: "open"}, nil
	}
	// Only chains the server verified against the client CA are here.
	if r.TLS != nil && len(r.TLS.VerifiedChains) > 0 && len(g.certs) > 0 {
		cn := r.TLS.VerifiedChains[0][0].Subject.CommonName
		if role, ok := g.certs[cn]; ok {
			return Identity{Name: cn, Role: role, Via: "certificate"}, nil
		}
	}
	auth := r.Header.Get("Authorization")
	if auth == "" {
		if r.TLS != nil && len(r.TLS.VerifiedChains) > 0 {
			return Identity{}, ErrBadCredentials
		}
		return Identity{}, ErrNoCredentials
	}
	scheme, tok, ok := strings.Cut(auth, " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") || strings.TrimSpace(tok) == "" {
		return Identity{}, ErrBadCredentials
	}
	h := sha256.Sum256([]byte(strings.TrimSpace(tok)))
	found := -1
	for i := range g.tokens { // every entry compared, in constant time each
		if subtle.ConstantTimeCompare(h[:], g.tokens[i].hash[:]) == 1 {
			found = i
		}
	}
	if found < 0 {
		return Identity{}, ErrBadCredentials
	}
	k := g.tokens[found]
	return Identity{Name: k.name, Role: k.role, Via: "token"}, nil
}

type ctxKey struct{}

// From returns the caller that the guard let in, if any.
func From(ctx context.Context) (Identity, bool) {
	id, ok := ctx.Value(ctxKey{}).(Identity)
	return id, ok
}

// Read wraps h so that only callers with the read or write role reach it.
func (g *Guard) Read(h http.Handler) http.Handler { return g.require(Read, h) }

// Write wraps h so that only callers with the write role reach it.
func (g *Guard) Write(h http.Handler) http.Handler { return g.require(Write, h) }

// require answers 401 to a request without valid credentials and 403 to a
// caller whose role is below need; others reach h with their Identity in
// the request's context.
func (g *Guard) require(need Role, h http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		id, err := g.Identify(r)
		if err != nil {
			w.Header().Set("WWW-Authenticate", `Bearer realm="modewatch"`)
			deny(w, http.StatusUnauthorized, err.Error())
			return
		}
		if id.Role < need {
			deny(w, http.StatusForbidden, fmt.Sprintf("access: %s %q may not do this (needs the %s role)", id.Via, id.Name, need))
			return
		}
		h.ServeHTTP(w, r.WithContext(context.WithValue(r.Context(), ctxKey{}, id)))
	})
}

func deny(w http.ResponseWriter, code int, msg string) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	_ = json.NewEncoder(w).Encode(map[string]string{"error": msg})
}

// TLSConfig returns the server TLS configuration of t, or nil when t has
// no certificate. With a client CA, a client certificate is asked for and,
// when given, must verify against it (a client without one may still use
// a token).
func TLSConfig(t configs.HTTPTLS) (*tls.Config, error) {
	if t.Cert == "" {
		return nil, nil
	}
	cert, err := tls.LoadX509KeyPair(t.Cert, t.Key)
	if err != nil {
		return nil, fmt.Errorf("access: http.tls: %w", err)
	}
	c := &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12}
	if t.ClientCA != "" {
		pem, err := os.ReadFile(t.ClientCA)
		if err != nil {
			return nil, fmt.Errorf("access: http.tls.client_ca: %w", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("access: http.tls.client_ca %s: no PEM certificate", t.ClientCA)
		}
		c.ClientCAs = pool
		c.ClientAuth = tls.VerifyClientCertIfGiven
	}
	return c, nil
}

// HashToken returns the stored form of a token: "sha256:" and the hex
// SHA-256 of its bytes.
func HashToken(tok string) string {
	h := sha256.Sum256([]byte(tok))
	return configs.TokenHashPrefix + hex.EncodeToString(h[:])
}

// NewToken returns a random token of 256 bits (43 characters of URL-safe
// base64), long enough that its unsalted SHA-256 is a safe stored form.
func NewToken() (string, error) {
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", err
	}
	return base64.RawURLEncoding.EncodeToString(b[:]), nil
}

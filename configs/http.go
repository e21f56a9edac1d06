package configs

import (
	"bufio"
	"encoding/hex"
	"fmt"
	"net"
	"os"
	"strconv"
	"strings"
	"time"
)

// Defaults of the HTTP API.
const (
	// DefaultListen is the HTTP API address: loopback only, port 7526.
	// The port was chosen on 2026-12-04 after checking the IANA Service
	// Name and Transport Protocol Port Number Registry (RFC 6335; a copy
	// with entries up to 2025): 7526 lies in the unassigned block
	// 7512-7541, with no unauthorised use noted. It also stays clear of
	// the ports metrics software commonly takes (exporters 9100-9999,
	// 9090, 3000, 8080-8081), of NATS (4222, 6222, 8222), and of the
	// neighbouring defaults 7474, 7687 and 7580-7590.
	DefaultListen = "127.0.0.1:7526"
	// DefaultHTTPReadTimeout bounds reading one whole request, body
	// included (a unit checkpoint of the largest allowed unit at a few
	// MB/s fits).
	DefaultHTTPReadTimeout = 2 * time.Minute
	// DefaultHTTPWriteTimeout bounds writing one response.
	DefaultHTTPWriteTimeout = 2 * time.Minute
	// DefaultHTTPIdleTimeout closes a keep-alive connection idle this long.
	DefaultHTTPIdleTimeout = 2 * time.Minute
	// DefaultHTTPLargeRequests is how many large requests (unit checkpoint
	// uploads and downloads) are served at once; more are refused with 429.
	DefaultHTTPLargeRequests = 1
)

// Roles of an HTTP client.
const (
	// RoleRead may read every GET endpoint.
	RoleRead = "read"
	// RoleWrite may also give commands (acknowledge, shelve, maintenance,
	// accept-as-normal) and replace a unit's checkpoint.
	RoleWrite = "write"
)

// TokenHashPrefix starts a stored token hash: "sha256:" and 64 lowercase
// hex digits of SHA-256 of the token's bytes ("modewatch token" makes one).
const TokenHashPrefix = "sha256:"

// HTTP is the HTTP API: where it listens, who may use it and its limits.
//
// With no tokens and no client certificates configured the API has no
// authentication, which is accepted on a loopback address only, or
// elsewhere with OpenAccess set.
type HTTP struct {
	// Listen address. Default [DefaultListen] (loopback only). "off"
	// disables the API.
	Listen string `yaml:"listen"`
	// TLS serves HTTPS with this certificate and key; ClientCA verifies
	// client certificates.
	TLS HTTPTLS `yaml:"tls"`
	// Tokens are bearer tokens (Authorization: Bearer <token>), each
	// stored as its hash with the name recorded as "by" and a role.
	Tokens []Token `yaml:"tokens"`
	// TokensFile holds more tokens, one per line: NAME ROLE sha256:HEX
	// ('#' starts a comment). Read at start.
	TokensFile string `yaml:"tokens_file"`
	// Clients are the client certificates allowed in (tls.client_ca
	// required), by the certificate's subject common name.
	Clients []CertClient `yaml:"clients"`
	// OpenAccess accepts a non-loopback Listen without any authentication
	// (anyone who reaches the port may acknowledge, shelve and replace
	// checkpoints). Logged as a warning at every start.
	OpenAccess bool `yaml:"open_access"`
	// ReadTimeout, WriteTimeout and IdleTimeout of the server. Defaults
	// [DefaultHTTPReadTimeout], [DefaultHTTPWriteTimeout] and
	// [DefaultHTTPIdleTimeout].
	ReadTimeout  time.Duration `yaml:"read_timeout"`
	WriteTimeout time.Duration `yaml:"write_timeout"`
	IdleTimeout  time.Duration `yaml:"idle_timeout"`
	// LargeRequests is how many checkpoint uploads or downloads are served
	// at once; more are answered 429. Default [DefaultHTTPLargeRequests].
	LargeRequests int `yaml:"large_requests"`
}

// HTTPTLS is the server side of TLS for the HTTP API.
type HTTPTLS struct {
	Cert string `yaml:"cert"`
	Key  string `yaml:"key"`
	// ClientCA verifies client certificates (PEM); a client may then
	// authenticate with a certificate named in http.clients.
	ClientCA string `yaml:"client_ca"`
}

// Token is one bearer token of the HTTP API.
type Token struct {
	// Name identifies the holder; it becomes the "by" of its commands.
	Name string `yaml:"name"`
	// Role is read or write.
	Role string `yaml:"role"`
	// Hash is "sha256:" and the hex SHA-256 of the token; the token
	// itself is never stored.
	Hash string `yaml:"hash"`
}

// CertClient is a client certificate allowed in, by subject common name.
type CertClient struct {
	Name string `yaml:"name"`
	Role string `yaml:"role"`
}

func (h *HTTP) applyDefaults() {
	if h.Listen == "" {
		h.Listen = DefaultListen
	}
	if h.ReadTimeout == 0 {
		h.ReadTimeout = DefaultHTTPReadTimeout
	}
	if h.WriteTimeout == 0 {
		h.WriteTimeout = DefaultHTTPWriteTimeout
	}
	if h.IdleTimeout == 0 {
		h.IdleTimeout = DefaultHTTPIdleTimeout
	}
	if h.LargeRequests == 0 {
		h.LargeRequests = DefaultHTTPLargeRequests
	}
}

// Authenticated reports whether the configuration names any way in
// (tokens, a tokens file, or client certificates).
func (h *HTTP) Authenticated() bool {
	return len(h.Tokens) > 0 || h.TokensFile != "" || (h.TLS.ClientCA != "" && len(h.Clients) > 0)
}

// Loopback reports whether the listen address accepts loopback
// connections only (127.0.0.0/8, ::1 or "localhost"); an empty host
// listens on every interface.
func (h *HTTP) Loopback() bool {
	host, _, err := net.SplitHostPort(h.Listen)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

func (h *HTTP) validate(v *validator) {
	if h.Listen == "off" {
		return
	}
	if h.Listen != "" {
		if _, port, err := net.SplitHostPort(h.Listen); err != nil {
			v.add("http.listen", "%q is not host:port (e.g. %s)", h.Listen, DefaultListen)
		} else if p, err := strconv.Atoi(port); err != nil || p < 0 || p > 65535 {
			v.add("http.listen", "port %q is not a number in 0..65535", port)
		} else if !h.Loopback() && !h.Authenticated() && !h.OpenAccess {
			v.add("http.listen", "%q is reachable from the network but the API has no authentication: configure http.tokens (or tokens_file, or tls.client_ca with clients), or set http.open_access: true to accept that anyone who reaches it may acknowledge, shelve and replace checkpoints", h.Listen)
		}
	}
	if (h.TLS.Cert == "") != (h.TLS.Key == "") {
		v.add("http.tls", "cert and key go together: give both or neither")
	}
	if h.TLS.ClientCA != "" && h.TLS.Cert == "" {
		v.add("http.tls.client_ca", "client certificates need TLS: give tls.cert and tls.key")
	}
	if len(h.Clients) > 0 && h.TLS.ClientCA == "" {
		v.add("http.clients", "client certificates need tls.client_ca to verify them")
	}
	names := map[string]string{}
	for i, t := range h.Tokens {
		p := fmt.Sprintf("http.tokens[%d]", i)
		if err := CheckToken(t); err != nil {
			v.add(p, "%v", err)
		}
		if prev, dup := names[t.Name]; dup && t.Name != "" {
			v.add(p+".name", "%q is also the name of %s", t.Name, prev)
		}
		names[t.Name] = p
	}
	for i, c := range h.Clients {
		p := fmt.Sprintf("http.clients[%d]", i)
		if strings.TrimSpace(c.Name) == "" {
			v.add(p+".name", "the certificate's common name is required")
		}
		if c.Role != RoleRead && c.Role != RoleWrite {
			v.add(p+".role", "%q is not read or write", c.Role)
		}
	}
	for _, x := range []struct {
		key string
		d   time.Duration
	}{{"read_timeout", h.ReadTimeout}, {"write_timeout", h.WriteTimeout}, {"idle_timeout", h.IdleTimeout}} {
		if x.d < 0 || (x.d > 0 && x.d < time.Second) {
			v.add("http."+x.key, "%v is too short (at least 1s)", x.d)
		}
	}
	if h.LargeRequests < 0 {
		v.add("http.large_requests", "%d is negative", h.LargeRequests)
	}
}

// CheckToken checks one token entry: a name, a role (read or write) and a
// hash "sha256:" + 64 hex digits.
func CheckToken(t Token) error {
	switch {
	case strings.TrimSpace(t.Name) == "" || strings.ContainsAny(t.Name, " \t"):
		return fmt.Errorf("name %q: a name without spaces is required (it is recorded as \"by\")", t.Name)
	case t.Role != RoleRead && t.Role != RoleWrite:
		return fmt.Errorf("role %q is not read or write", t.Role)
	}
	hx, ok := strings.CutPrefix(t.Hash, TokenHashPrefix)
	if b, err := hex.DecodeString(hx); !ok || err != nil || len(b) != 32 {
		return fmt.Errorf("hash must be %q and 64 hex digits (modewatch token makes one), not the token itself", TokenHashPrefix)
	}
	return nil
}

// ReadTokensFile reads a tokens file: one token per line as
// "NAME ROLE sha256:HEX"; blank lines and text after '#' are ignored.
// Errors name the file and line.
func ReadTokensFile(path string) ([]Token, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	var out []Token
	sc := bufio.NewScanner(f)
	for n := 1; sc.Scan(); n++ {
		line, _, _ := strings.Cut(sc.Text(), "#")
		fields := strings.Fields(line)
		if len(fields) == 0 {
			continue
		}
		if len(fields) != 3 {
			return nil, fmt.Errorf("%s:%d: want NAME ROLE sha256:HEX, got %d fields", path, n, len(fields))
		}
		t := Token{Name: fields[0], Role: fields[1], Hash: fields[2]}
		if err := CheckToken(t); err != nil {
			return nil, fmt.Errorf("%s:%d: %w", path, n, err)
		}
		out = append(out, t)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return out, nil
}

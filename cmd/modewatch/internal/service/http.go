package service

import (
	"crypto/tls"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"strconv"
	"time"

	"modewatch/cmd/modewatch/internal/access"
)

// Guard returns the access guard of the HTTP API, so that other handlers
// served beside it (the status page) take the same credentials:
//
//	mux.Handle("GET /page/", svc.Guard().Read(page))
//	mux.Handle("POST /page/ack", svc.Guard().Write(ack))
//
// Inside a handler, access.From(r.Context()) names the caller.
func (s *Service) Guard() *access.Guard { return s.guard }

// serveHTTP starts the HTTP API (unless http.listen is "off"): TLS when
// configured, the access guard, timeouts and the large-request limit. A
// network address without authentication is refused unless open_access
// says it is meant, and then logged as a warning.
func (s *Service) serveHTTP() error {
	h := s.cfg.HTTP
	if h.Listen == "off" {
		return nil
	}
	var err error
	if s.guard, err = access.New(h); err != nil {
		return fmt.Errorf("service: %w", err)
	}
	if s.guard.Open() && !h.Loopback() {
		if !h.OpenAccess {
			return fmt.Errorf("service: http.listen %q is reachable from the network but the API has no authentication (configure http.tokens or client certificates, or set http.open_access: true)", h.Listen)
		}
		s.log.Warn("HTTP API OPEN TO THE NETWORK WITHOUT AUTHENTICATION: anyone who reaches it may acknowledge, shelve, put units in maintenance and replace checkpoints (http.open_access: true)",
			"listen", h.Listen)
	}
	tcfg, err := access.TLSConfig(h.TLS)
	if err != nil {
		return fmt.Errorf("service: %w", err)
	}
	s.large = make(chan struct{}, max(h.LargeRequests, 1))
	if s.ln, err = net.Listen("tcp", h.Listen); err != nil {
		return fmt.Errorf("service: http: %w", err)
	}
	scheme := "http://"
	if tcfg != nil {
		s.ln = tls.NewListener(s.ln, tcfg)
		scheme = "https://"
	}
	s.srv = &http.Server{Handler: s.routes(), TLSConfig: tcfg,
		ReadHeaderTimeout: 10 * time.Second, ReadTimeout: h.ReadTimeout, WriteTimeout: h.WriteTimeout, IdleTimeout: h.IdleTimeout,
		MaxHeaderBytes: 64 << 10, ErrorLog: slog.NewLogLogger(s.log.With("component", "http").Handler(), slog.LevelWarn)}
	s.srv.RegisterOnShutdown(s.page.Close) // the page's event streams never go idle
	s.info.HTTP = scheme + s.ln.Addr().String()
	s.log.Info("HTTP API", "url", s.info.HTTP, "authentication", !s.guard.Open(), "tls", tcfg != nil,
		"client_certificates", h.TLS.ClientCA != "")
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		if err := s.srv.Serve(s.ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			s.log.Error("http server stopped", "err", err)
		}
	}()
	return nil
}

// largeSlotWait is how long a large request waits for a slot before it is
// refused. A client can hold the whole of a large response (the handler's
// last Write went straight to the socket) a moment before that handler
// returns and frees its slot, so a client that sends its next transfer at
// once would otherwise be refused by its own previous one.
const largeSlotWait = time.Second

// largeRequest wraps a handler whose request or response may be large (a
// unit checkpoint): at most http.large_requests run at once, and a request
// beyond that waits at most [largeSlotWait] (without reading its body) and
// is then answered 429 rather than queued, so that a burst of uploads
// cannot hold several bodies in memory together.
func (s *Service) largeRequest(h http.HandlerFunc) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		wait := time.NewTimer(largeSlotWait)
		defer wait.Stop()
		select {
		case s.large <- struct{}{}:
			defer func() { <-s.large }()
			h(w, r)
			return
		case <-wait.C:
		case <-r.Context().Done():
		}
		w.Header().Set("Retry-After", strconv.Itoa(5))
		writeJSON(w, http.StatusTooManyRequests, map[string]string{
			"error": fmt.Sprintf("busy: %d large request(s) (checkpoint transfers) in progress; retry later", cap(s.large))})
	}
}

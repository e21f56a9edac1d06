package sink

import (
	"context"
	"io"
	"net/http"
	"net/http/httptest"
	"slices"
	"sync"
	"testing"
	"time"
)

// hook is a real HTTP server that fails the first `failures` requests with
// 503 and then accepts, recording accepted bodies and idempotency keys.
type hook struct {
	mu       sync.Mutex
	failures int
	calls    int
	keys     []string
	bodies   [][]byte
	status   int // status of the failing answers
}

func (h *hook) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	body, _ := io.ReadAll(r.Body)
	h.mu.Lock()
	defer h.mu.Unlock()
	h.calls++
	if r.Method != http.MethodPost || r.Header.Get("Content-Type") != "application/json" {
		http.Error(w, "bad request", http.StatusBadRequest)
		return
	}
	if h.calls <= h.failures {
		w.Header().Set("Retry-After", "0")
		http.Error(w, "maintenance", h.status)
		return
	}
	h.keys = append(h.keys, r.Header.Get("Idempotency-Key"))
	h.bodies = append(h.bodies, body)
	w.WriteHeader(http.StatusNoContent)
}

func (h *hook) got() ([]string, [][]byte) {
	h.mu.Lock()
	defer h.mu.Unlock()
	return slices.Clone(h.keys), slices.Clone(h.bodies)
}

// TestWebhookRecovers: a webhook that answers 503 for a while, then
// recovers, receives every record, in order, each once.
func TestWebhookRecovers(t *testing.T) {
	h := &hook{failures: 7, status: http.StatusServiceUnavailable}
	srv := httptest.NewServer(h)
	defer srv.Close()
	wh, err := NewWebhook(srv.URL+"/alerts", nil, http.Header{"Authorization": {"Bearer x"}})
	if err != nil {
		t.Fatal(err)
	}
	s, err := New(wh, Options{Name: "hook", SpoolDir: t.TempDir(), QueueLen: 2,
		Backoff: Backoff{Initial: time.Millisecond, Max: 8 * time.Millisecond, Jitter: 0.5}, Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	ms := messages(t, records(t))
	for _, m := range ms {
		if err := s.Submit(m); err != nil {
			t.Fatal(err)
		}
	}
	waitFor(t, "all records", func() bool { k, _ := h.got(); return len(k) == len(ms) })
	if err := closeNow(t, s); err != nil {
		t.Fatal(err)
	}
	keys, bodies := h.got()
	for i, m := range ms {
		if keys[i] != m.ID || string(bodies[i]) != string(m.Data) {
			t.Fatalf("record %d: key %q, want %q", i, keys[i], m.ID)
		}
		validate(t, bodies[i])
	}
	if st := s.Stats(); st.Retries != 7 || st.Delivered != uint64(len(ms)) {
		t.Errorf("stats %+v, want 7 retries", st)
	}
}

// TestWebhookPermanent: a 4xx other than 408/425/429 is not retried.
func TestWebhookPermanent(t *testing.T) {
	h := &hook{failures: 1, status: http.StatusUnprocessableEntity}
	srv := httptest.NewServer(h)
	defer srv.Close()
	wh, _ := NewWebhook(srv.URL, nil, nil)
	err := wh.Deliver(context.Background(), msg(0))
	if !IsPermanent(err) {
		t.Errorf("422: %v, want permanent", err)
	}
	if err := wh.Deliver(context.Background(), msg(1)); err != nil {
		t.Errorf("second: %v", err)
	}
	h429 := &hook{failures: 1, status: http.StatusTooManyRequests}
	srv2 := httptest.NewServer(h429)
	defer srv2.Close()
	wh2, _ := NewWebhook(srv2.URL, nil, nil)
	if err := wh2.Deliver(context.Background(), msg(0)); err == nil || IsPermanent(err) {
		t.Errorf("429: %v, want retryable", err)
	}
	for _, bad := range []string{"ftp://x/y", "http://", "::"} {
		if _, err := NewWebhook(bad, nil, nil); err == nil {
			t.Errorf("url %q accepted", bad)
		}
	}
}

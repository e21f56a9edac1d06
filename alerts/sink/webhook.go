package sink

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"strconv"
	"time"
)

// Webhook posts each message's JSON to an http(s) URL with the headers
// Content-Type: application/json and Idempotency-Key: <message id>.
// A 2xx answer delivers; 408, 425, 429 and 5xx answers and network errors
// are retried (honouring a Retry-After of seconds); other answers are
// permanent failures.
type Webhook struct {
	url    string
	client *http.Client
	header http.Header
}

// NewWebhook returns a webhook deliverer. client nil means a client with a
// 10 s timeout; header adds fixed headers (for example Authorization).
func NewWebhook(rawURL string, client *http.Client, header http.Header) (*Webhook, error) {
	u, err := url.Parse(rawURL)
	if err != nil {
		return nil, fmt.Errorf("sink: webhook url: %w", err)
	}
	if (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		return nil, fmt.Errorf("sink: webhook url %q: need http(s)://host/…", rawURL)
	}
	if client == nil {
		client = &http.Client{Timeout: 10 * time.Second}
	}
	return &Webhook{url: rawURL, client: client, header: header.Clone()}, nil
}

// Deliver posts m.
func (w *Webhook) Deliver(ctx context.Context, m Message) error {
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, w.url, bytes.NewReader(m.Data))
	if err != nil {
		return Permanent(fmt.Errorf("sink: webhook: %w", err))
	}
	for k, v := range w.header {
		req.Header[k] = v
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("Idempotency-Key", m.ID)
	resp, err := w.client.Do(req)
	if err != nil {
		return fmt.Errorf("sink: webhook: %w", err)
	}
	body, _ := io.ReadAll(io.LimitReader(resp.Body, 512))
	resp.Body.Close()
	if resp.StatusCode >= 200 && resp.StatusCode < 300 {
		return nil
	}
	err = fmt.Errorf("sink: webhook: %s: %s", resp.Status, bytes.TrimSpace(body))
	switch c := resp.StatusCode; {
	case c == http.StatusRequestTimeout, c == http.StatusTooEarly, c == http.StatusTooManyRequests, c >= 500:
		if s, perr := strconv.Atoi(resp.Header.Get("Retry-After")); perr == nil && s > 0 {
			return RetryAfter(err, time.Duration(s)*time.Second)
		}
		return err
	}
	return Permanent(err)
}

// Close closes idle connections.
func (w *Webhook) Close() error {
	w.client.CloseIdleConnections()
	return nil
}

package statuspage

import (
	"bytes"
	"encoding/json"
	"fmt"
	"net/http"
	"strconv"
	"time"
)

// heartbeat is how often an idle event stream sends a comment, so that
// proxies keep it open and a dead client is noticed.
const heartbeat = 15 * time.Second

// Clients returns the number of open event streams and how many were
// refused (MaxClients reached) since the page was made.
func (p *Page) Clients() (open int, refused uint64) {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.clients, p.refused
}

// events streams the view named by ?view= (plant, unit with ?unit= and
// ?window=, incidents) as server-sent events: one "view" event at once,
// then one whenever the view changed, at most one per interval. A client
// beyond MaxClients gets 503 with Retry-After; the page then retries. The
// stream says "retry:" so a plain EventSource resumes after a closed
// connection too, and every event carries an id (its sequence number).
func (p *Page) events(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	view := q.Get("view")
	unit := q.Get("unit")
	win := window(q.Get("window"))
	render := func(b *base) (any, bool) {
		switch view {
		case "unit":
			return p.unit(b, unit, win)
		case "incidents":
			return p.incidents(b), true
		default:
			return p.plant(b), true
		}
	}
	if view == "unit" {
		if _, ok := render(p.snapshot()); !ok {
			http.Error(w, "no unit "+unit, http.StatusNotFound)
			return
		}
	}
	rc := http.NewResponseController(w)
	fl := flusher{rc}
	select {
	case <-p.done:
		http.Error(w, "the service is stopping", http.StatusServiceUnavailable)
		return
	case p.sem <- struct{}{}:
	default:
		p.mu.Lock()
		p.refused++
		p.mu.Unlock()
		w.Header().Set("Retry-After", "5")
		http.Error(w, fmt.Sprintf("too many live clients (at most %d); retry later", p.opt.MaxClients), http.StatusServiceUnavailable)
		return
	}
	p.mu.Lock()
	p.clients++
	p.mu.Unlock()
	defer func() {
		p.mu.Lock()
		p.clients--
		p.mu.Unlock()
		<-p.sem
	}()

	_ = rc.SetWriteDeadline(time.Now().Add(heartbeat + p.opt.Interval + 10*time.Second))
	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)
	fmt.Fprintf(w, "retry: %d\n\n", (2 * p.opt.Interval).Milliseconds())
	if err := rc.Flush(); err != nil {
		return // the writer cannot stream
	}

	// A server's WriteTimeout would cut the stream: each write gets its
	// own deadline instead (where the server supports it).
	grace := heartbeat + p.opt.Interval + 10*time.Second
	seq, _ := strconv.ParseUint(r.Header.Get("Last-Event-ID"), 10, 64)
	var last []byte
	tick := time.NewTicker(p.opt.Interval)
	defer tick.Stop()
	idle := time.Duration(0)
	for {
		v, ok := render(p.snapshot())
		if !ok {
			fmt.Fprint(w, "event: gone\ndata: {}\n\n")
			fl.Flush()
			return
		}
		b, err := json.Marshal(v)
		if err != nil {
			return
		}
		_ = rc.SetWriteDeadline(time.Now().Add(grace))
		switch {
		case !bytes.Equal(b, last):
			seq++
			if _, err := fmt.Fprintf(w, "id: %d\nevent: view\ndata: %s\n\n", seq, b); err != nil {
				return
			}
			fl.Flush()
			last, idle = b, 0
		case idle >= heartbeat:
			if _, err := fmt.Fprint(w, ": still here\n\n"); err != nil {
				return
			}
			fl.Flush()
			idle = 0
		}
		select {
		case <-r.Context().Done():
			return
		case <-p.done:
			return
		case <-tick.C:
			idle += p.opt.Interval
		}
	}
}

// flusher flushes through a ResponseController (which finds the
// http.Flusher behind wrapping writers); events checks once that the
// writer can flush.
type flusher struct{ rc *http.ResponseController }

func (f flusher) Flush() { _ = f.rc.Flush() }

package sink

import (
	"context"
	"fmt"
	"io"
	"os"
	"sync"
)

// Lines writes each message's JSON as one line (JSON lines) to a writer:
// standard output or a file opened for appending.
type Lines struct {
	mu   sync.Mutex
	w    io.Writer
	f    *os.File // owned, closed by Close; nil for a borrowed writer
	sync bool
	buf  []byte
}

// NewLines writes to w (for example os.Stdout), which Close leaves open.
func NewLines(w io.Writer) *Lines { return &Lines{w: w} }

// OpenLines appends to the file at path, creating it (mode 0644). With
// syncEach every line is fsynced before Deliver returns.
func OpenLines(path string, syncEach bool) (*Lines, error) {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_APPEND|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("sink: lines: %w", err)
	}
	return &Lines{w: f, f: f, sync: syncEach}, nil
}

// Deliver writes m.Data and a newline in one write.
func (l *Lines) Deliver(_ context.Context, m Message) error {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.buf = append(append(l.buf[:0], m.Data...), '\n')
	if _, err := l.w.Write(l.buf); err != nil {
		return fmt.Errorf("sink: lines: %w", err)
	}
	if l.sync && l.f != nil {
		if err := l.f.Sync(); err != nil {
			return fmt.Errorf("sink: lines: %w", err)
		}
	}
	return nil
}

// Close closes the file opened by OpenLines.
func (l *Lines) Close() error {
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.f == nil {
		return nil
	}
	err := l.f.Close()
	l.f = nil
	return err
}

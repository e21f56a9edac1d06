package cli

import (
	"bufio"
	"compress/gzip"
	"context"
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"

	"modewatch/stream"
)

// progressEvery is how often a progress bar is redrawn.
const progressEvery = 250 * time.Millisecond

// isTerminal reports whether w is a terminal (progress bars are drawn only
// then, so that logs and pipes stay clean).
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}

// fileProgress draws a bar on standard error while fit or replay reads its
// inputs: bytes read of the total size of the files (compressed size for
// gzip files), lines per second and the time left. With standard input
// among the inputs the total is unknown and the bar is a spinner.
type fileProgress struct {
	bar    *progressbar.ProgressBar
	verb   string
	read   atomic.Int64
	intake atomic.Pointer[stream.Intake]
	start  time.Time
	stop   chan struct{}
	wg     sync.WaitGroup
	once   sync.Once
}

// newFileProgress returns a progress bar for reading inputs, or nil when
// standard error is not a terminal or quiet is set.
func newFileProgress(env IO, quiet bool, verb string, inputs []string) *fileProgress {
	if quiet || !isTerminal(env.Err) {
		return nil
	}
	var total int64
	for _, name := range inputs {
		if name == "-" {
			total = -1
			break
		}
		st, err := os.Stat(name)
		if err != nil {
			total = -1 // the read reports the error
			break
		}
		total += st.Size()
	}
	p := &fileProgress{verb: verb, start: time.Now(), stop: make(chan struct{})}
	p.bar = progressbar.NewOptions64(total,
		progressbar.OptionSetWriter(env.Err),
		progressbar.OptionSetDescription(verb),
		progressbar.OptionShowBytes(true),
		progressbar.OptionSetPredictTime(true),
		progressbar.OptionSetElapsedTime(true),
		progressbar.OptionSetWidth(24),
		progressbar.OptionThrottle(progressEvery),
		progressbar.OptionClearOnFinish(),
	)
	p.wg.Add(1)
	go p.loop()
	return p
}

func (p *fileProgress) loop() {
	defer p.wg.Done()
	t := time.NewTicker(progressEvery)
	defer t.Stop()
	for {
		select {
		case <-p.stop:
			return
		case <-t.C:
			p.draw()
		}
	}
}

func (p *fileProgress) draw() {
	desc := p.verb
	if in := p.intake.Load(); in != nil {
		if s := time.Since(p.start).Seconds(); s > 0 {
			desc = fmt.Sprintf("%s %s lines/s", p.verb, siCount(float64(in.Stats().Lines)/s))
		}
	}
	p.bar.Describe(desc)
	p.bar.Set64(p.read.Load())
}

// finish removes the bar. Safe on nil and more than once.
func (p *fileProgress) finish() {
	if p == nil {
		return
	}
	p.once.Do(func() {
		close(p.stop)
		p.wg.Wait()
		p.bar.Finish()
		p.bar.Exit()
	})
}

// readInput is the pipeline's ReadInput hook: it reads one input like
// stream.Intake.ReadFiles does ("-" is standard input; gzip by name or
// content) while counting the bytes taken from the file.
func (p *fileProgress) readInput(ctx context.Context, in *stream.Intake, name string) error {
	p.intake.Store(in)
	if name == "-" {
		return in.ReadFiles(ctx, name)
	}
	f, err := os.Open(name)
	if err != nil {
		return fmt.Errorf("stream: %w", err)
	}
	defer f.Close()
	br := bufio.NewReaderSize(&countingReader{r: f, n: &p.read}, 64<<10)
	magic, _ := br.Peek(2)
	gz := len(magic) == 2 && magic[0] == 0x1f && magic[1] == 0x8b
	if strings.HasSuffix(name, ".gz") && !gz {
		return fmt.Errorf("stream: %s: name ends in .gz but the content is not gzip", name)
	}
	if !gz {
		return in.Read(ctx, name, br)
	}
	zr, err := gzip.NewReader(br)
	if err != nil {
		return fmt.Errorf("stream: %s: %w", name, err)
	}
	defer zr.Close()
	return in.Read(ctx, name, zr)
}

// countingReader adds the bytes it reads to n.
type countingReader struct {
	r io.Reader
	n *atomic.Int64
}

func (c *countingReader) Read(b []byte) (int, error) {
	k, err := c.r.Read(b)
	c.n.Add(int64(k))
	return k, err
}

// siCount formats a rate with a k/M suffix.
func siCount(v float64) string {
	switch {
	case v >= 1e6:
		return fmt.Sprintf("%.1fM", v/1e6)
	case v >= 1e4:
		return fmt.Sprintf("%.0fk", v/1e3)
	}
	return fmt.Sprintf("%.0f", v)
}

// countProgress draws a bar over a number of tasks (tune's settings), with
// the lines replayed per second across all workers and the time left.
type countProgress struct {
	bar   *progressbar.ProgressBar
	start time.Time
	lines atomic.Uint64
}

// newCountProgress returns a bar over n tasks, or nil when standard error
// is not a terminal or quiet is set.
func newCountProgress(env IO, quiet bool, verb string, n int) *countProgress {
	if quiet || !isTerminal(env.Err) {
		return nil
	}
	return &countProgress{start: time.Now(), bar: progressbar.NewOptions(n,
		progressbar.OptionSetWriter(env.Err),
		progressbar.OptionSetDescription(verb),
		progressbar.OptionShowCount(),
		progressbar.OptionSetPredictTime(true),
		progressbar.OptionSetElapsedTime(true),
		progressbar.OptionSetWidth(24),
		progressbar.OptionThrottle(progressEvery),
		progressbar.OptionClearOnFinish(),
	)}
}

// add counts one finished task that replayed lines lines.
func (p *countProgress) add(verb string, lines uint64) {
	if p == nil {
		return
	}
	total := p.lines.Add(lines)
	if s := time.Since(p.start).Seconds(); s > 0 {
		p.bar.Describe(fmt.Sprintf("%s %s lines/s", verb, siCount(float64(total)/s)))
	}
	p.bar.Add(1)
}

func (p *countProgress) finish() {
	if p == nil {
		return
	}
	p.bar.Finish()
	p.bar.Exit()
}

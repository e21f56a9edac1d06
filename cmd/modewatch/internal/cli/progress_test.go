package cli

import (
	"bytes"
	"compress/gzip"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/schollz/progressbar/v3"

	"modewatch/cmd/modewatch/internal/pipeline"
)

// TestProgressReadInput: reading through the progress bar's ReadInput hook
// (plain and gzip files) counts every byte of the files and scores the
// same frames as the stream's own reader; the bar draws lines per second.
func TestProgressReadInput(t *testing.T) {
	plain, _ := demoLog(t, 3)
	raw, err := os.ReadFile(plain)
	if err != nil {
		t.Fatal(err)
	}
	var zb bytes.Buffer
	zw := gzip.NewWriter(&zb)
	zw.Write(raw)
	zw.Close()
	gz := filepath.Join(t.TempDir(), "demo.lp.gz")
	os.WriteFile(gz, zb.Bytes(), 0o644)
	total := int64(len(raw) + zb.Len())

	run := func(hook bool) (uint64, *fileProgress) {
		var p *fileProgress
		opt := pipeline.ReplayOptions{Inputs: []string{plain, gz}}
		if hook {
			var bar bytes.Buffer
			p = &fileProgress{verb: "replay", start: time.Now(), stop: make(chan struct{}),
				bar: progressbar.NewOptions64(total, progressbar.OptionSetWriter(&bar))}
			opt.ReadInput = p.readInput
		}
		res, err := pipeline.Replay(context.Background(), opt)
		if err != nil {
			t.Fatal(err)
		}
		n, _, _ := res.Pipeline.Frames()
		return n, p
	}
	want, _ := run(false)
	got, p := run(true)
	if got != want || got == 0 {
		t.Errorf("frames through the hook %d, through the stream reader %d", got, want)
	}
	if p.read.Load() != total {
		t.Errorf("counted %d bytes, the files hold %d", p.read.Load(), total)
	}
	p.draw()
	if !strings.Contains(p.bar.String(), "lines/s") {
		t.Errorf("bar description %q", p.bar.String())
	}

	// A name ending in .gz must hold gzip, as with the stream's reader.
	bad := filepath.Join(t.TempDir(), "plain.gz")
	os.WriteFile(bad, raw, 0o644)
	p2 := &fileProgress{verb: "replay", start: time.Now(), stop: make(chan struct{}), bar: progressbar.NewOptions64(1, progressbar.OptionSetWriter(&bytes.Buffer{}))}
	_, err = pipeline.Replay(context.Background(), pipeline.ReplayOptions{Inputs: []string{bad}, ReadInput: p2.readInput, Config: nil})
	if err == nil || !strings.Contains(err.Error(), "not gzip") {
		t.Errorf("plain content named .gz: %v", err)
	}
}

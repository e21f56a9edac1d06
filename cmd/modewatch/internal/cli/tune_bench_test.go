package cli

import (
	"context"
	"log/slog"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"modewatch/cmd/modewatch/internal/pipeline"
	"modewatch/cmd/modewatch/internal/report"
	"modewatch/cmd/modewatch/internal/testkit"
	"modewatch/configs"
	"modewatch/stream"
)

// benchDemoLog writes the first hours of the demo scenario (invented
// data) and returns its path.
func benchDemoLog(b *testing.B, hours int) string {
	s := testkit.DemoScenario(b, time.Duration(hours)*time.Hour)
	files, err := s.WriteFiles(b.TempDir(), false)
	if err != nil {
		b.Fatal(err)
	}
	return files.Readings
}

// benchReplay replays log once per iteration, with the report collector
// on the OnScore hook or without it (the baseline).
func benchReplay(b *testing.B, log string, collect bool) {
	cfg := &configs.Config{}
	cfg.ApplyDefaults()
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		opt := pipeline.ReplayOptions{Config: cfg, Inputs: []string{log}}
		if collect {
			opt.OnScore = report.NewCollector().Observe
		}
		if _, err := pipeline.Replay(context.Background(), opt); err != nil {
			b.Fatal(err)
		}
	}
}

// benchDecode reads log through decode → map → align with a handler that
// does nothing: the part of a replay that tune repeats in every worker
// instead of keeping the frames in memory.
func benchDecode(b *testing.B, log string) {
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		chans, err := stream.NewChannels(nil, 0)
		if err != nil {
			b.Fatal(err)
		}
		in, err := stream.NewIntake(chans, stream.Options{Align: stream.AlignConfig{Period: 20 * time.Second}, Log: slog.New(slog.DiscardHandler)},
			func(*stream.Frame) error { return nil })
		if err != nil {
			b.Fatal(err)
		}
		if err := in.ReadFiles(context.Background(), log); err != nil {
			b.Fatal(err)
		}
		if err := in.Flush(); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkReplayReport measures what collecting the report's series adds
// to a replay of 12 h of the demo scenario ("collect" against "baseline"
// in the same run), and how much of a replay is reading and framing the
// log ("decode-only"), which tune repeats per setting.
func BenchmarkReplayReport(b *testing.B) {
	log := benchDemoLog(b, 12)
	b.Run("decode-only", func(b *testing.B) { benchDecode(b, log) })
	b.Run("baseline", func(b *testing.B) { benchReplay(b, log, false) })
	b.Run("collect", func(b *testing.B) { benchReplay(b, log, true) })
}

// BenchmarkTuneJobs runs tune on a grid of 4 settings over 12 h of the
// demo with 1 and with 2 workers; the ratio of the two shows the parallel
// speed-up (bounded by the cores actually free).
func BenchmarkTuneJobs(b *testing.B) {
	log := benchDemoLog(b, 12)
	dir := b.TempDir()
	truth := filepath.Join(dir, "truth.json")
	os.WriteFile(truth, []byte(`{"episodes":[]}`), 0o644)
	grid := filepath.Join(dir, "grid.yaml")
	os.WriteFile(grid, []byte("alpha: [0.01, 0.001]\non_delay: [\"3/5\", \"6/10\"]\n"), 0o644)
	for _, jobs := range []int{1, 2} {
		b.Run("jobs="+strconv.Itoa(jobs), func(b *testing.B) {
			b.ReportAllocs()
			for i := 0; i < b.N; i++ {
				code := Main(context.Background(), []string{"tune", "--quiet", "--input", log, "--truth", truth, "--grid", grid,
					"--out", filepath.Join(dir, "out"), "--jobs", strconv.Itoa(jobs)}, IO{Out: discard{}, Err: discard{}})
				if code != ExitOK {
					b.Fatalf("exit %d", code)
				}
			}
		})
	}
}

type discard struct{}

func (discard) Write(p []byte) (int, error) { return len(p), nil }

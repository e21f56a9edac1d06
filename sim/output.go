package sim

import (
	"bufio"
	"compress/gzip"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"
)

// WriteLineProtocol streams every sample of the scenario to w as line
// protocol, in nominal time order. Memory use is one sample, whatever the
// duration.
func (s *Scenario) WriteLineProtocol(w io.Writer) error {
	return s.WriteRange(w, s.Start, s.End())
}

// WriteRange streams the samples whose nominal time lies in [from, to) to
// w as line protocol. The plant is simulated from its start all the same,
// so the samples are those of the whole run (trends, states and faults as
// in WriteLineProtocol).
func (s *Scenario) WriteRange(w io.Writer, from, to time.Time) error {
	g, err := s.NewGenerator()
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 256<<10)
	var buf []byte
	for g.Step() {
		t := g.Time()
		if !t.Before(to) {
			break
		}
		if t.Before(from) {
			continue
		}
		if buf, err = g.AppendLines(buf[:0]); err != nil {
			return err
		}
		if _, err := bw.Write(buf); err != nil {
			return fmt.Errorf("sim: writing readings: %w", err)
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("sim: writing readings: %w", err)
	}
	return nil
}

// Truth is the label file: the fault episodes with channel names in the
// auto-discovery form unit.asset.field.
type Truth struct {
	Episodes []TruthEpisode `json:"episodes"`
}

// TruthEpisode is one labelled fault; times are RFC 3339 in JSON.
type TruthEpisode struct {
	ID       string    `json:"id"`
	Start    time.Time `json:"start"`
	End      time.Time `json:"end"`
	Kind     string    `json:"kind"`
	Channels []string  `json:"channels"`
}

// Truth returns the scenario's labels.
func (s *Scenario) Truth() Truth {
	t := Truth{Episodes: []TruthEpisode{}}
	for _, e := range s.Episodes {
		t.Episodes = append(t.Episodes, TruthEpisode{
			ID: e.ID, Start: e.Start.UTC(), End: e.End.UTC(), Kind: string(e.Kind),
			Channels: append([]string(nil), e.Channels...),
		})
	}
	return t
}

// WriteTruth writes the truth file (indented JSON) to w.
func (s *Scenario) WriteTruth(w io.Writer) error {
	b, err := json.MarshalIndent(s.Truth(), "", "  ")
	if err != nil {
		return fmt.Errorf("sim: truth: %w", err)
	}
	b = append(b, '\n')
	if _, err := w.Write(b); err != nil {
		return fmt.Errorf("sim: writing truth: %w", err)
	}
	return nil
}

// ReadTruth parses a truth file; unknown keys are errors.
func ReadTruth(r io.Reader) (Truth, error) {
	var t Truth
	dec := json.NewDecoder(r)
	dec.DisallowUnknownFields()
	if err := dec.Decode(&t); err != nil {
		return Truth{}, fmt.Errorf("sim: truth: %w", err)
	}
	return t, nil
}

// Files names what WriteFiles wrote.
type Files struct {
	Readings string // readings.lp or readings.lp.gz; "" for a split scenario
	Normal   string // normal.lp(.gz): the samples before the split
	Test     string // test.lp(.gz): the samples from the split on
	Truth    string // truth.json
}

// WriteFiles writes readings.lp (readings.lp.gz when gz) and truth.json into
// dir, creating dir if needed. Gzip output (fastest level: generation is
// dominated by compression otherwise) carries no name or time in its header,
// so the same seed gives the same bytes.
//
// A scenario with a split (Scenario.Split) is written as normal.lp (the
// samples before it, to fit on) and test.lp (the rest, to replay) instead
// of readings.lp; see WriteSplit.
func (s *Scenario) WriteFiles(dir string, gz bool) (Files, error) {
	if !s.Split.IsZero() {
		return s.WriteSplit(dir, gz, s.Start, s.End())
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return Files{}, fmt.Errorf("sim: %w", err)
	}
	files := Files{Readings: filepath.Join(dir, "readings.lp"), Truth: filepath.Join(dir, "truth.json")}
	if gz {
		files.Readings += ".gz"
	}
	if err := s.writeLP(files.Readings, gz, s.Start, s.End()); err != nil {
		return Files{}, err
	}
	if err := writeFile(files.Truth, s.WriteTruth); err != nil {
		return Files{}, err
	}
	return files, nil
}

// WriteSplit writes a split scenario's samples in [from, Split) to
// dir/normal.lp and those in [Split, to) to dir/test.lp (.lp.gz when gz),
// and the truth file of the episodes that start before to, ended at to at
// the latest. from and to shorten a run for a quick check; the samples are
// those of the whole simulation all the same.
func (s *Scenario) WriteSplit(dir string, gz bool, from, to time.Time) (Files, error) {
	if s.Split.IsZero() {
		return Files{}, fmt.Errorf("sim: scenario %q has no split", s.Name)
	}
	if !from.Before(s.Split) || !to.After(s.Split) {
		return Files{}, fmt.Errorf("sim: the range %s to %s does not contain the split at %s", from.Format(time.RFC3339), to.Format(time.RFC3339), s.Split.Format(time.RFC3339))
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return Files{}, fmt.Errorf("sim: %w", err)
	}
	ext := ".lp"
	if gz {
		ext += ".gz"
	}
	files := Files{Normal: filepath.Join(dir, "normal"+ext), Test: filepath.Join(dir, "test"+ext), Truth: filepath.Join(dir, "truth.json")}
	for _, part := range []struct {
		path     string
		from, to time.Time
	}{{files.Normal, from, s.Split}, {files.Test, s.Split, to}} {
		if err := s.writeLP(part.path, gz, part.from, part.to); err != nil {
			return Files{}, err
		}
	}
	c := *s
	c.Episodes = nil
	for _, e := range s.Episodes {
		if e.Start.Before(to) && !e.Start.Before(from) {
			if e.End.After(to) {
				e.End = to
			}
			c.Episodes = append(c.Episodes, e)
		}
	}
	if err := writeFile(files.Truth, c.WriteTruth); err != nil {
		return Files{}, err
	}
	return files, nil
}

// writeLP writes the samples in [from, to) to path, gzipped when gz.
func (s *Scenario) writeLP(path string, gz bool, from, to time.Time) error {
	return writeFile(path, func(w io.Writer) error {
		if !gz {
			return s.WriteRange(w, from, to)
		}
		zw, _ := gzip.NewWriterLevel(w, gzip.BestSpeed) // level is valid; error impossible
		if err := s.WriteRange(zw, from, to); err != nil {
			return err
		}
		return zw.Close()
	})
}

// writeFile writes path through a temporary file renamed into place, so a
// failed run leaves no half-written file under the final name.
func writeFile(path string, fill func(io.Writer) error) (err error) {
	f, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return fmt.Errorf("sim: %w", err)
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(f.Name())
		}
	}()
	if err := f.Chmod(0o644); err != nil {
		return fmt.Errorf("sim: %w", err)
	}
	if err := fill(f); err != nil {
		return err
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("sim: %w", err)
	}
	if err := os.Rename(f.Name(), path); err != nil {
		return fmt.Errorf("sim: %w", err)
	}
	return nil
}

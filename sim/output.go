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
	g, err := s.NewGenerator()
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 256<<10)
	var buf []byte
	for g.Step() {
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
	Readings string // readings.lp or readings.lp.gz
	Truth    string // truth.json
}

// WriteFiles writes readings.lp (readings.lp.gz when gz) and truth.json into
// dir, creating dir if needed. Gzip output (fastest level: generation is
// dominated by compression otherwise) carries no name or time in its header,
// so the same seed gives the same bytes.
func (s *Scenario) WriteFiles(dir string, gz bool) (Files, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return Files{}, fmt.Errorf("sim: %w", err)
	}
	files := Files{Readings: filepath.Join(dir, "readings.lp"), Truth: filepath.Join(dir, "truth.json")}
	if gz {
		files.Readings += ".gz"
	}
	if err := writeFile(files.Readings, func(w io.Writer) error {
		if !gz {
			return s.WriteLineProtocol(w)
		}
		zw, _ := gzip.NewWriterLevel(w, gzip.BestSpeed) // level is valid; error impossible
		if err := s.WriteLineProtocol(zw); err != nil {
			return err
		}
		return zw.Close()
	}); err != nil {
		return Files{}, err
	}
	if err := writeFile(files.Truth, s.WriteTruth); err != nil {
		return Files{}, err
	}
	return files, nil
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

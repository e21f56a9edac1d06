package sim

import (
	"bytes"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"
)

// TestTruthRoundTrip: the truth file parses back to the scenario's labels,
// with RFC 3339 times, and rejects unknown keys.
func TestTruthRoundTrip(t *testing.T) {
	s, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := s.WriteTruth(&b); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), `"start": "2026-03-06T04:00:00Z"`) {
		t.Errorf("F1 start not in RFC 3339 UTC:\n%s", b.String())
	}
	got, err := ReadTruth(&b)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, s.Truth()) {
		t.Errorf("round trip: got %+v, want %+v", got, s.Truth())
	}
	if _, err := ReadTruth(strings.NewReader(`{"episodes": [], "extra": 1}`)); err == nil {
		t.Error("unknown key accepted")
	}
}

// TestRebase: the whole scenario, faults included, moves to the new start;
// the original is untouched.
func TestRebase(t *testing.T) {
	s, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	at := time.Date(2027, 1, 1, 12, 0, 0, 500, time.UTC)
	r := s.Rebase(at)
	if !r.Start.Equal(at.Truncate(time.Second)) {
		t.Errorf("start %v", r.Start)
	}
	for i, e := range r.Episodes {
		if e.Start.Sub(r.Start) != s.Episodes[i].Start.Sub(s.Start) || e.End.Sub(e.Start) != s.Episodes[i].End.Sub(s.Episodes[i].Start) {
			t.Errorf("%s moved inconsistently", e.ID)
		}
	}
	if s.Start.Year() != 2026 || s.Episodes[0].Start.Year() != 2026 {
		t.Error("Rebase changed the original")
	}
}

// TestCheckGuardsEditedScenarios: scenarios changed in code are re-checked.
func TestCheckGuardsEditedScenarios(t *testing.T) {
	base, err := LoadBytes("faults.yaml", []byte(faultBase))
	if err != nil {
		t.Fatal(err)
	}
	ep := Episode{ID: "X", Kind: Bias, Start: base.Start, End: base.End(), Channels: []string{"u1.a.p"}, Size: 1}
	cases := map[string]func(s *Scenario){
		"unknown kind":    func(s *Scenario) { s.Episodes[0].Kind = "melt" },
		"unknown channel": func(s *Scenario) { s.Episodes[0].Channels[0] = "u1.a.zz" },
		"empty window":    func(s *Scenario) { s.Episodes[0].End = s.Episodes[0].Start },
		"noise factor":    func(s *Scenario) { s.Episodes[0].Kind = Noise },
		"jitter":          func(s *Scenario) { s.Jitter = s.Period },
		"dropout":         func(s *Scenario) { s.Dropout = 1 },
		"bad term":        func(s *Scenario) { s.Units[0].Assets[0].Channels[0].Terms[0].A = 99 },
	}
	for name, edit := range cases {
		s := base.Clone()
		s.Episodes = []Episode{ep}
		s.Episodes[0].Channels = []string{"u1.a.p"}
		edit(s)
		if _, err := s.NewGenerator(); err == nil || !strings.HasPrefix(err.Error(), "sim: ") {
			t.Errorf("%s: got %v", name, err)
		}
	}
	c := base.Clone()
	c.Units[0].Assets[0].Channels[0].Terms[0].A = 99
	if base.Units[0].Assets[0].Channels[0].Terms[0].A == 99 {
		t.Error("Clone shares terms with the original")
	}
}

// TestWriteFilesErrors: a directory that cannot be created is an error, and
// nothing half-written is left under the final names.
func TestWriteFilesErrors(t *testing.T) {
	s := shortDemo(t, time.Minute)
	dir := t.TempDir()
	blocker := filepath.Join(dir, "file")
	if err := os.WriteFile(blocker, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := s.WriteFiles(filepath.Join(blocker, "out"), false); err == nil || !strings.HasPrefix(err.Error(), "sim: ") {
		t.Errorf("got %v", err)
	}
	bad := s.Clone()
	bad.Dropout = 2
	out := filepath.Join(dir, "out")
	if _, err := bad.WriteFiles(out, true); err == nil {
		t.Error("invalid scenario written")
	}
	if left, _ := os.ReadDir(out); len(left) != 0 {
		t.Errorf("left behind: %v", left)
	}
}

package pipeline

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"modewatch/cmd/modewatch/internal/store"
)

// A unit checkpoint is a model file holding that one unit with its live
// tracker state (not refreshed, not frozen), written atomically to
// <generation dir>/<unit>.ckpt.json (see WriteCheckpoints). A unit's
// checkpoint depends on no other unit, so it can be moved to another
// service instance.
const checkpointSuffix = ".ckpt.json"

// CheckpointPath returns the checkpoint file of unit in dir.
func CheckpointPath(dir, unit string) string {
	return filepath.Join(dir, unit+checkpointSuffix)
}

// AlertsFile is the file of the alarm engine's state in a checkpoint
// directory. The alarm engine spans the units, so its state is one file,
// captured between the same two frames as the units' checkpoints.
const AlertsFile = "alerts.snapshot.json"

// Checkpoint returns the state of every unit that has a model and the
// alarm engine's state, under the pipeline's lock so that everything is
// captured between the same two frames.
func (p *Pipeline) Checkpoint() ([]*ModelFile, []byte, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	var out []*ModelFile
	var errs []error
	var snap bytes.Buffer
	if err := p.alerts.Snapshot(&snap); err != nil {
		errs = append(errs, err)
	}
	for _, u := range p.Units() {
		if u.tr == nil || u.failed != nil {
			continue
		}
		state, err := saveState(u.tr)
		if err != nil {
			errs = append(errs, fmt.Errorf("unit %s: %w", u.Name, err))
			continue
		}
		settings := settingsOf(u.model)
		if u.equal {
			settings.HalfLife = 0
		}
		out = append(out, &ModelFile{
			Format: ModelFormat, Version: ModelVersion, Created: time.Now().UTC(), Period: Duration(p.opt.Period),
			Frames: u.frames, From: u.firstT, To: u.lastT,
			Units: []ModelUnit{{Name: u.Name, Channels: append([]string(nil), u.names...), Settings: settings,
				Modes: u.modesView(), State: state}},
		})
	}
	return out, snap.Bytes(), errors.Join(errs...)
}

// CurrentFile names, inside a checkpoint directory, the generation
// directory that holds the latest complete checkpoint.
const CurrentFile = "CURRENT"

// WriteCheckpoints writes every unit's checkpoint and the alarm engine's
// state as one generation: a new directory dir/gen-<n> with one file per
// unit and the alarm file, each written atomically, and then the CURRENT
// file naming it, also atomically. A crash at any point leaves CURRENT on
// the previous complete generation, so units and alarms are never restored
// from different moments. Older generations are removed afterwards. It
// returns how many units were written.
func (p *Pipeline) WriteCheckpoints(dir string) (int, error) {
	cks, snap, err := p.Checkpoint()
	if err != nil {
		return 0, err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return 0, fmt.Errorf("pipeline: %w", err)
	}
	gen := fmt.Sprintf("gen-%020d", time.Now().UnixNano())
	gdir := filepath.Join(dir, gen)
	if err := os.Mkdir(gdir, 0o755); err != nil {
		return 0, fmt.Errorf("pipeline: %w", err)
	}
	if len(snap) > 0 {
		if err := store.WriteFile(filepath.Join(gdir, AlertsFile), snap, 0o644); err != nil {
			return 0, err
		}
	}
	for _, ck := range cks {
		if err := WriteModel(CheckpointPath(gdir, ck.Units[0].Name), ck); err != nil {
			return 0, err
		}
	}
	if err := store.WriteFile(filepath.Join(dir, CurrentFile), []byte(gen+"\n"), 0o644); err != nil {
		return 0, err
	}
	if ents, err := os.ReadDir(dir); err == nil {
		for _, e := range ents {
			if e.IsDir() && strings.HasPrefix(e.Name(), "gen-") && e.Name() != gen {
				os.RemoveAll(filepath.Join(dir, e.Name()))
			}
		}
	}
	return len(cks), nil
}

// currentDir returns the directory of the latest complete checkpoint in
// dir: the generation CURRENT names, or dir itself when there is no
// CURRENT (unit checkpoint files placed there by hand, for example moved
// from another instance).
func currentDir(dir string) (string, error) {
	b, err := os.ReadFile(filepath.Join(dir, CurrentFile))
	if errors.Is(err, os.ErrNotExist) {
		return dir, nil
	}
	if err != nil {
		return "", fmt.Errorf("pipeline: %w", err)
	}
	gen := strings.TrimSpace(string(b))
	if !strings.HasPrefix(gen, "gen-") || strings.ContainsAny(gen, "/\\") {
		return "", fmt.Errorf("%w: %s names %q, not a checkpoint generation", ErrModelFile, filepath.Join(dir, CurrentFile), gen)
	}
	return filepath.Join(dir, gen), nil
}

// ReadCheckpoints reads every unit checkpoint in dir. Files that cannot be
// used are returned as errors (one per file) and left out; a missing dir
// is no error.
func ReadCheckpoints(dir string) ([]*ModelFile, []error) {
	if _, err := os.Stat(dir); errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	dir, err := currentDir(dir)
	if err != nil {
		return nil, []error{err}
	}
	ents, err := os.ReadDir(dir)
	if err != nil {
		if errors.Is(err, os.ErrNotExist) {
			return nil, nil
		}
		return nil, []error{fmt.Errorf("pipeline: %w", err)}
	}
	var out []*ModelFile
	var errs []error
	for _, e := range ents {
		if e.IsDir() || !strings.HasSuffix(e.Name(), checkpointSuffix) {
			continue
		}
		m, err := ReadModel(filepath.Join(dir, e.Name()))
		if err != nil {
			errs = append(errs, err)
			continue
		}
		if len(m.Units) != 1 || m.Units[0].Name+checkpointSuffix != e.Name() {
			errs = append(errs, fmt.Errorf("%s: %w: want exactly the unit named by the file", e.Name(), ErrModelFile))
			continue
		}
		out = append(out, m)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Units[0].Name < out[j].Units[0].Name })
	return out, errs
}

// Restore creates units from checkpoints before the first frame. A
// checkpoint that does not fit (other period, other settings, damaged
// state) is reported in the returned errors and its unit warms up afresh;
// the rest are restored. Frames up to each unit's last checkpointed frame
// are skipped, so none is scored twice.
func (p *Pipeline) Restore(cks []*ModelFile) (restored []string, errs []error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, ck := range cks {
		mu := &ck.Units[0]
		if time.Duration(ck.Period) != p.opt.Period {
			errs = append(errs, fmt.Errorf("unit %s: checkpoint frame period %v differs from the configured %v; the unit warms up again",
				mu.Name, time.Duration(ck.Period), p.opt.Period))
			continue
		}
		want := settingsOf(p.cfg.ModelFor(mu.Name))
		if b := p.baselineUnit(mu.Name); b != nil {
			want = b.Settings
		}
		if mu.Settings != want {
			errs = append(errs, fmt.Errorf("unit %s: the model settings changed since the checkpoint (%+v, now %+v); the unit warms up again",
				mu.Name, mu.Settings, want))
			continue
		}
		if old := p.lookup(mu.Name); old != nil {
			if !old.baseline || old.frames > 0 {
				errs = append(errs, fmt.Errorf("unit %s: already running; checkpoint not restored", mu.Name))
				continue
			}
			p.drop(old) // the checkpoint is newer than the fitted baseline
		}
		u, err := p.unitFromModel(mu, time.Duration(ck.Period))
		if err != nil {
			errs = append(errs, fmt.Errorf("unit %s: %w; the unit warms up again", mu.Name, err))
			continue
		}
		u.baseline = false
		u.frames = ck.Frames
		u.firstT, u.lastT = ck.From, ck.To
		u.skipUntil = ck.To
		restored = append(restored, mu.Name)
	}
	return restored, errs
}

// drop removes a unit that has not seen a frame yet.
func (p *Pipeline) drop(u *Unit) {
	p.unitsMu.Lock()
	defer p.unitsMu.Unlock()
	delete(p.byName, u.Name)
	for i, v := range p.units {
		if v == u {
			p.units = append(p.units[:i], p.units[i+1:]...)
			break
		}
	}
}

// baselineUnit returns the fitted unit called name, or nil.
func (p *Pipeline) baselineUnit(name string) *ModelUnit {
	if b := p.opt.Baseline; b != nil {
		for i := range b.Units {
			if b.Units[i].Name == name {
				return &b.Units[i]
			}
		}
	}
	return nil
}

// RestoreAlerts restores the alarm engine's state from dir (after the
// units, so that frozen units are frozen again). A missing file is no
// error; a damaged one is, and leaves the engine as it was.
func (p *Pipeline) RestoreAlerts(dir string) (bool, error) {
	if _, err := os.Stat(dir); errors.Is(err, os.ErrNotExist) {
		return false, nil
	}
	dir, err := currentDir(dir)
	if err != nil {
		return false, err
	}
	f, err := os.Open(filepath.Join(dir, AlertsFile))
	if err != nil {
		if errors.Is(err, os.ErrNotExist) {
			return false, nil
		}
		return false, fmt.Errorf("pipeline: %w", err)
	}
	defer f.Close()
	if err := p.alerts.Restore(f); err != nil {
		return false, fmt.Errorf("pipeline: %s: %w", AlertsFile, err)
	}
	return true, nil
}

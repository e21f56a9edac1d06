package pipeline

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/store"
	"modewatch/stream"
)

// A unit checkpoint is a model file holding that one unit with its live
// tracker state (not refreshed, not frozen) and its alarm state
// (ModelUnit.Alerts), written atomically to <generation dir>/<unit>.ckpt.json
// (see WriteCheckpoints). A unit's checkpoint depends on no other unit, so
// it can be moved alone to another service instance.
const checkpointSuffix = ".ckpt.json"

// CheckpointPath returns the checkpoint file of unit in dir.
func CheckpointPath(dir, unit string) string {
	return filepath.Join(dir, unit+checkpointSuffix)
}

// AlertsFile is the file in which checkpoints before the per-unit alarm
// state kept the alarm engine's state of all units. It is no longer
// written; ReadCheckpoints still reads it for unit checkpoints without
// their own alarm state.
const AlertsFile = "alerts.snapshot.json"

// Checkpoint returns the state of every unit that has a model, tracker
// and alarm state together, under the pipeline's lock so that everything
// is captured between the same two frames.
func (p *Pipeline) Checkpoint() ([]*ModelFile, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	var out []*ModelFile
	var errs []error
	for _, u := range p.Units() {
		if u.tr == nil || u.failed != nil {
			continue
		}
		ck, err := p.checkpointOf(u)
		if err != nil {
			errs = append(errs, err)
			continue
		}
		out = append(out, ck)
	}
	return out, errors.Join(errs...)
}

// ErrNoUnit marks a unit that does not exist or has no model yet.
var ErrNoUnit = errors.New("pipeline: no such unit with a model")

// CheckpointUnit returns the checkpoint of the unit called name (tracker
// and alarm state), the file another instance restores to carry the unit
// on. It wraps ErrNoUnit when the unit is unknown or has no model yet.
func (p *Pipeline) CheckpointUnit(name string) (*ModelFile, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	u := p.lookup(name)
	if u == nil || u.tr == nil || u.failed != nil {
		return nil, fmt.Errorf("%w: %q", ErrNoUnit, name)
	}
	return p.checkpointOf(u)
}

// checkpointOf captures unit u. Called under p.mu.
func (p *Pipeline) checkpointOf(u *Unit) (*ModelFile, error) {
	state, err := saveState(u.tr)
	if err != nil {
		return nil, fmt.Errorf("unit %s: %w", u.Name, err)
	}
	var snap bytes.Buffer
	if err := p.alerts.SnapshotUnit(u.Name, &snap); err != nil {
		return nil, fmt.Errorf("unit %s: %w", u.Name, err)
	}
	settings := settingsOf(u.model)
	if u.equal {
		settings.HalfLife = 0
	}
	var sf *StatesFile
	if u.states != nil && len(u.states.models) > 0 {
		if sf, _, err = u.statesBaseline(false); err != nil {
			return nil, fmt.Errorf("unit %s: %w", u.Name, err)
		}
	}
	return &ModelFile{
		Format: ModelFormat, Version: ModelVersion, Created: time.Now().UTC(), Period: alerts.Duration(p.opt.Period),
		Frames: u.frames, From: u.firstT, To: u.lastT,
		Units: []ModelUnit{{Name: u.Name, Channels: append([]string(nil), u.names...), Settings: settings,
			Modes: u.modesView(), State: state, Alerts: snap.Bytes(), Last: u.lastReadings(), Quality: u.Profiles(), States: sf, Context: u.contextIn(),
			DriverSlopes: u.driverSlopes(u.tr, false), DriverLags: u.driverLags(u.tr), Calibration: u.cal, Recentre: u.recentreState(), Smoothed: u.smoothedState(), Lagged: u.laggedState(),
			Screen: u.screenState()}},
	}, nil
}

// lastReadings returns the readings carried in the unit's last scored
// frame. Called under p.mu, so they belong to the same frame as the
// tracker state: the aligner may already hold newer readings (frames
// emitted or pending after it), which a restart gets again from the
// unacknowledged messages.
func (u *Unit) lastReadings() []LastReading {
	var out []LastReading
	for k, at := range u.lastAt {
		if at != noReading && k < len(u.names) {
			out = append(out, LastReading{Channel: u.names[k], Value: u.lastV[k], Time: time.Unix(0, at).UTC()})
		}
	}
	return out
}

// setLast restores the carried readings of a unit checkpoint, so that a
// checkpoint taken before the unit scores again saves them unchanged.
func (u *Unit) setLast(last []LastReading) {
	u.lastV = make([]float64, len(u.names))
	u.lastAt = make([]int64, len(u.names))
	for k := range u.lastAt {
		u.lastV[k], u.lastAt[k] = math.NaN(), noReading
	}
	for _, r := range last {
		if k := slices.Index(u.names, r.Channel); k >= 0 && !r.Time.IsZero() {
			u.lastV[k], u.lastAt[k] = r.Value, r.Time.UnixNano()
		}
	}
	u.seedV, u.seedAt = nil, nil
	if len(last) > 0 {
		u.seedV, u.seedAt = slices.Clone(u.lastV), slices.Clone(u.lastAt)
	}
}

// seeded reports as use whether channel k, which frame f does not reach, carries
// the checkpoint's reading in f as an uninterrupted aligner would carry
// it: its event time t before the frame's end E and E − t within the
// staleness limit. After a restart the channel registry starts empty, and
// the aligner gets a channel's carried reading (stream.Intake.SeedLast)
// only when the channel's first reading is decoded again; a frame emitted
// before that (the channel's next readings dropped or later) would
// otherwise miss a reading the uninterrupted run had.
//
// live reports whether the seed may still be carried by a later frame
// (not reached by f, not stale at its end). end is f's end,
// stream.FrameEnd of f, in ns (seedEnd).
func (u *Unit) seeded(k int, f *stream.Frame, end int64) (use, live bool) {
	if i := u.idx[k]; i >= 0 && i < len(f.Values) {
		return false, false // the aligner has the channel, and its seed
	}
	at := u.seedAt[k]
	live = at != noReading && end-at <= int64(u.p.stale)
	return live && at < end, live
}

// seedEnd returns the end of frame f in ns, the instant seeded compares
// the seeds' event times with.
func (u *Unit) seedEnd(f *stream.Frame) int64 {
	return stream.FrameEnd(f.Start, u.p.opt.Period).UnixNano()
}

// carrySeeds gives the channels of frame f that seeded holds for the
// checkpoint's carried reading, and returns how many. Once no seed can be
// used again (every one reached by the frames or stale), the seeds are
// dropped. It allocates nothing.
func (u *Unit) carrySeeds(f *stream.Frame) int {
	n, live := 0, false
	end := u.seedEnd(f)
	for k := range u.seedAt {
		use, l := u.seeded(k, f, end)
		if use {
			u.x[k], u.miss[k] = u.seedV[k], false
			n++
		}
		live = live || l
	}
	if !live {
		u.seedV, u.seedAt = nil, nil
	}
	return n
}

// CurrentFile names, inside a checkpoint directory, the generation
// directory that holds the latest complete checkpoint.
const CurrentFile = "CURRENT"

// WriteCheckpoints writes every unit's checkpoint as one generation: a
// new directory dir/gen-<n> with one file per unit, each written
// atomically, and then the CURRENT file naming it, also atomically. A
// crash at any point leaves CURRENT on the previous complete generation. Older generations are removed afterwards. It
// returns how many units were written.
func (p *Pipeline) WriteCheckpoints(dir string) (int, error) {
	cks, err := p.Checkpoint()
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
// is no error. A checkpoint written before units carried their own alarm
// state gets it from the generation's AlertsFile, when there is one.
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
	var legacy []byte
	for _, m := range out {
		if len(m.Units[0].Alerts) > 0 {
			continue
		}
		if legacy == nil {
			b, err := os.ReadFile(filepath.Join(dir, AlertsFile))
			if err != nil {
				break // none: those units' alarms start from normal
			}
			legacy = b
		}
		m.Units[0].Alerts = legacy
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Units[0].Name < out[j].Units[0].Name })
	return out, errs
}

// Restore creates units from checkpoints, each with its tracker and its
// alarm state, before the unit's first frame. It may be called while other
// units run (a unit's checkpoint moved in from another instance): they are
// not touched. A checkpoint that does not fit (other period, other
// settings, damaged tracker or alarm state) is reported in the returned
// errors and its unit warms up afresh (or starts from the fitted model) with
// alarms from normal; the rest are restored. Frames up to each unit's last
// checkpointed frame are skipped, so none is scored twice.
func (p *Pipeline) Restore(cks []*ModelFile) (restored []string, errs []error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	for _, ck := range cks {
		mu := &ck.Units[0]
		if err := checkUnitCaps(mu, p.cfg.ModelFor(mu.Name).MaxChannels); err != nil {
			errs = append(errs, err) // sizes first: the file may come from the network
			continue
		}
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
		old := p.lookup(mu.Name)
		if old != nil && (!old.baseline || old.frames > 0) {
			errs = append(errs, fmt.Errorf("unit %s: already running; checkpoint not restored", mu.Name))
			continue
		}
		u, err := p.buildFromModel(mu, time.Duration(ck.Period))
		if err == nil {
			err = u.setScreen(mu.Screen) // before anything is registered: a refusal changes nothing
		}
		if err != nil {
			errs = append(errs, fmt.Errorf("unit %s: %w; the unit warms up again", mu.Name, err))
			continue
		}
		if old != nil {
			p.drop(old) // the checkpoint is newer than the fitted baseline
		}
		p.register(u)
		// The alarm state after the unit is registered, so that a unit
		// whose learning was frozen by an alert is frozen again.
		if len(mu.Alerts) > 0 {
			if err := p.alerts.RestoreUnit(mu.Name, bytes.NewReader(mu.Alerts)); err != nil {
				p.drop(u)
				if old != nil {
					p.register(old)
				}
				errs = append(errs, fmt.Errorf("unit %s: alarm state: %w; incompatible checkpoint, the unit warms up again", mu.Name, err))
				continue
			}
		} else {
			p.log.Warn("checkpoint without alarm state; the unit's alarms start from normal", "unit", mu.Name)
		}
		p.resolve(u)
		u.baseline = false
		u.frames = ck.Frames
		u.firstT, u.lastT = ck.From, ck.To
		u.skipUntil = ck.To
		u.setLast(mu.Last)
		u.setRecentre(mu.Recentre)
		u.setSmoothed(mu.Smoothed)
		restored = append(restored, mu.Name)
	}
	return restored, errs
}

// resolve gives a unit restored while the pipeline runs the channels of
// its model that the registry already holds and no other unit owns.
// Called under p.mu.
func (p *Pipeline) resolve(u *Unit) {
	for k, name := range u.names {
		i, ok := p.ch.Index(name)
		if !ok || i >= p.known || u.idx[k] >= 0 {
			continue // not seen yet: assign resolves it by name
		}
		if o := p.owner[i]; o != nil && o != u && p.lookup(o.Name) == o {
			p.log.Warn("channel of a restored unit belongs to another unit; it is scored as missing",
				"unit", u.Name, "channel", name, "owner", o.Name)
			continue
		}
		if !p.ch.Channel(i).Model {
			continue
		}
		u.idx[k] = i
		p.owner[i] = u
	}
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

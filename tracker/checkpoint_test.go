package tracker

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"math"
	"testing"
	"time"

	"modewatch/tracker/modes"
)

func sameScore(a, b *Score) bool {
	eq := func(x, y float64) bool { return math.Float64bits(x) == math.Float64bits(y) }
	if a.Ready != b.Ready || a.State != b.State || len(a.Contrib) != len(b.Contrib) || len(a.Missing) != len(b.Missing) ||
		len(a.Excluded) != len(b.Excluded) || a.Frame != b.Frame {
		return false
	}
	for _, p := range [][2]float64{{a.T2, b.T2}, {a.SPE, b.SPE}, {a.Phi, b.Phi}, {a.T2Limit, b.T2Limit},
		{a.SPELimit, b.SPELimit}, {a.PhiLimit, b.PhiLimit}, {a.NEff, b.NEff}} {
		if !eq(p[0], p[1]) {
			return false
		}
	}
	for i := range a.Contrib {
		x, y := a.Contrib[i], b.Contrib[i]
		if x.Channel != y.Channel || !eq(x.RBC, y.RBC) || !eq(x.RBCLimit, y.RBCLimit) || !eq(x.SPEContrib, y.SPEContrib) ||
			!eq(x.T2Contrib, y.T2Contrib) || len(x.Modes) != len(y.Modes) {
			return false
		}
	}
	return true
}

// restoreTracker returns a new tracker of p channels under cfg restored
// from the checkpoint ck; an error ends the test.
func restoreTracker(t *testing.T, p int, cfg Config, ck []byte) *Tracker {
	t.Helper()
	tr, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := tr.UnmarshalBinary(ck); err != nil {
		t.Fatal(err)
	}
	return tr
}

// stepBoth steps a and b through the same n frames of src and ends the
// test, naming what, at the first frame whose scores are not bit for bit
// the same (sameScore).
func stepBoth(t *testing.T, a, b *Tracker, src *gaussSource, p, n int, what string) {
	t.Helper()
	x := make([]float64, p)
	var sa, sb Score
	for k := 0; k < n; k++ {
		src.frame(x)
		if err := a.Step(&sa, x, nil); err != nil {
			t.Fatal(err)
		}
		if err := b.Step(&sb, x, nil); err != nil {
			t.Fatal(err)
		}
		if !sameScore(&sa, &sb) {
			t.Fatalf("frame %d: %s differs:\n got %+v\nwant %+v", k, what, sb, sa)
		}
	}
}

// Checkpoint round trip: restoring the state and feeding the same frames
// gives bit-identical scores, across batches, refreshes, missing frames and
// a freeze; a truncated, corrupt, wrong-version or foreign checkpoint is a
// clear error and leaves the tracker unchanged.
func TestCheckpointRoundTrip(t *testing.T) {
	const p = 12
	cfg := Config{Period: time.Second, HalfLife: 10 * time.Minute, WarmUp: 60, RefreshEvery: 16, Batch: 5,
		Modes: modes.Config{Count: 3, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 5}}}}
	tr, src := newStream(t, p, cfg)
	xs := src.frames(600, p)
	miss := make([]bool, p)
	miss[3] = true
	step := func(tr *Tracker, k int, sc *Score) {
		var m []bool
		if k%37 == 0 {
			m = miss
		}
		if k == 400 {
			tr.Freeze()
		}
		if k == 430 {
			tr.Thaw()
		}
		if err := tr.Step(sc, xs[k], m); err != nil {
			t.Fatal(err)
		}
	}
	var sc Score
	for k := 0; k < 203; k++ { // mid-batch, between refreshes
		step(tr, k, &sc)
	}
	ck, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	want := make([]Score, 0, 397)
	for k := 203; k < 600; k++ {
		step(tr, k, &sc)
		c := sc
		c.Contrib = append([]Contribution(nil), sc.Contrib...)
		want = append(want, c)
	}
	re := restoreTracker(t, p, cfg, ck)
	for k := 203; k < 600; k++ {
		step(re, k, &sc)
		if !sameScore(&sc, &want[k-203]) {
			t.Fatalf("frame %d: restored score differs:\n got %+v\nwant %+v", k, sc, want[k-203])
		}
	}
	ck2, _ := re.MarshalBinary()
	ck3, _ := tr.MarshalBinary()
	if !bytes.Equal(ck2, ck3) {
		t.Error("checkpoints of the original and the restored tracker differ after the same frames")
	}

	// Bad checkpoints.
	fresh, _ := New(p, cfg)
	before, _ := fresh.MarshalBinary()
	wrongVer := bytes.Clone(ck)
	binary.LittleEndian.PutUint16(wrongVer[4:], 99)
	corrupt := bytes.Clone(ck)
	corrupt[len(corrupt)/2] ^= 0x40
	other, _ := New(p, Config{Period: time.Second, HalfLife: 5 * time.Minute, WarmUp: 60, RefreshEvery: 16, Batch: 5,
		Modes: modes.Config{Count: 3, Sparsity: []modes.Sparsity{{Method: modes.L0, K: 5}}}})
	small, _ := New(p-1, cfg)
	for name, c := range map[string]struct {
		tr   *Tracker
		data []byte
	}{
		"truncated":     {fresh, ck[:len(ck)-100]},
		"truncated2":    {fresh, ck[:10]},
		"empty":         {fresh, nil},
		"corrupt":       {fresh, corrupt},
		"wrong version": {fresh, wrongVer},
		"not ours":      {fresh, []byte("MWMD0123456789abcdefghij")},
		"other config":  {other, ck},
		"other width":   {small, ck},
	} {
		err := c.tr.UnmarshalBinary(c.data)
		if !errors.Is(err, ErrCheckpoint) {
			t.Errorf("%s: want ErrCheckpoint, got %v", name, err)
			continue
		}
		t.Logf("%s: %v", name, err)
	}
	after, _ := fresh.MarshalBinary()
	if !bytes.Equal(before, after) {
		t.Error("a rejected checkpoint changed the tracker")
	}
}

// A fitted, calibrated baseline survives a checkpoint.
func TestCheckpointBaseline(t *testing.T) {
	const p = 8
	tr, src := newStream(t, p, Config{Modes: modes.Config{Count: 2}})
	if err := tr.Fit(src.frames(500, p)); err != nil {
		t.Fatal(err)
	}
	if err := tr.Calibrate(src.frames(300, p)); err != nil {
		t.Fatal(err)
	}
	ck, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	re := restoreTracker(t, p, Config{Modes: modes.Config{Count: 2}}, ck)
	var a, b Score
	for _, x := range src.frames(50, p) {
		tr.Step(&a, x, nil)
		re.Step(&b, x, nil)
		if !sameScore(&a, &b) || !b.Calibrated || b.State != StateBaseline {
			t.Fatalf("baseline restore differs: %+v vs %+v", a, b)
		}
	}
}

// Version 1 checkpoints (before Grow and per-channel batch steps) are still
// read: a version 2 checkpoint of a tracker that never grew and whose batch
// has one step per frame, rewritten in the version 1 layout (no initial
// width field), restores with bit-identical scores.
func TestCheckpointVersion1(t *testing.T) {
	const p = 7
	cfg := Config{Period: time.Second, HalfLife: 10 * time.Minute, WarmUp: 40, RefreshEvery: 8, Batch: 16, Modes: modes.Config{Count: 2}, Persist: -1}
	tr, src, ck := steppedTracker(t, p, cfg, 101)
	// Header: magic 4, version 2, p 4, fingerprint 8, flags 1, frames 8,
	// learned 8, since 4, then the u32 initial width (version 2 on). The
	// u32 count of the lag section (version 3 on), the u8 flag of the
	// variance section (version 4 on), the u8 flag of the MEWMA section
	// (version 5 on), the u8 flag of the persist section (version 6 on),
	// the u8 flag of the creep section (version 7 on) and the u8 flag of
	// the level section (version 9 on) sit before the modes.
	const at = 4 + 2 + 4 + 8 + 1 + 8 + 8 + 4
	mb, err := tr.ms.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	lagAt := len(ck) - 4 - len(mb) - 4 - 1 - 1 - 1 - 1 - 1 - 4
	v1 := append(bytes.Clone(ck[:at]), ck[at+4:lagAt]...)
	v1 = append(v1, ck[lagAt+4+1+1+1+1+1:len(ck)-4]...)
	binary.LittleEndian.PutUint16(v1[4:], 1)
	v1 = binary.LittleEndian.AppendUint32(v1, crc32.ChecksumIEEE(v1))
	stepBoth(t, tr, restoreTracker(t, p, cfg, v1), src, p, 50, "version 1 restore")
}

// recordSteps steps tr through xs and returns pick of every frame's
// score; a frame whose score is not ready or that ready rejects fails the
// test, naming what it lacks.
func recordSteps[T any](t *testing.T, tr *Tracker, xs [][]float64, what string, ready func(*Score) bool, pick func(*Score) T) []T {
	t.Helper()
	out := make([]T, len(xs))
	var sc Score
	for k, x := range xs {
		if err := tr.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if !sc.Ready || !ready(&sc) {
			t.Fatalf("frame %d: no %s (%+v)", k, what, sc)
		}
		out[k] = pick(&sc)
	}
	return out
}

// replaysSame restores a tracker from ck (p channels, cfg), steps it
// through xs and reports whether pick of every frame's score is the same
// as want's (by same), and the first frame that is not (−1: none).
func replaysSame[T any](t *testing.T, p int, cfg Config, ck []byte, xs [][]float64, want []T, pick func(*Score) T, same func(a, b T) bool) (bool, int) {
	t.Helper()
	re := restoreTracker(t, p, cfg, ck)
	var sc Score
	for k, x := range xs {
		if err := re.Step(&sc, x, nil); err != nil {
			t.Fatal(err)
		}
		if !same(pick(&sc), want[k]) {
			return false, k
		}
	}
	return true, -1
}

// steppedTracker returns a tracker of p channels that has stepped n frames
// of its stream, the stream, and the tracker's checkpoint.
func steppedTracker(t *testing.T, p int, cfg Config, n int) (*Tracker, *gaussSource, []byte) {
	t.Helper()
	tr, src, _, _ := warmStream(t, p, cfg, n)
	ck, err := tr.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	return tr, src, ck
}

// stateCheckpointConfig is the learning of the statistics' checkpoint
// tests (two modes, batches of 4, a refresh every 16 frames), without the
// statistic each of them sets on, and with the persistence weight off
// (its own tests set it), so the byte layouts they read hold its flag 0.
func stateCheckpointConfig() Config {
	return Config{Period: time.Second, HalfLife: 10 * time.Minute, WarmUp: 60, RefreshEvery: 16, Batch: 4, Modes: modes.Config{Count: 2}, Persist: -1}
}

// replayCheck steps a tracker of p channels under cfg through n frames of
// its stream (steppedTracker), checkpoints it and records pick of the
// scores of the next m frames (recordSteps: each must be ready, and ready,
// else the test ends naming what). A tracker restored from the checkpoint
// must give the same picks (by same) over those frames, else the test
// ends. It returns the checkpoint and replay, which reports for any
// checkpoint whether a tracker restored from it gives the same picks, and
// the first frame that does not (replaysSame).
func replayCheck[T any](t *testing.T, p int, cfg Config, n, m int, what string, ready func(*Score) bool, pick func(*Score) T, same func(a, b T) bool) ([]byte, func(ck []byte) (bool, int)) {
	t.Helper()
	tr, src, ck := steppedTracker(t, p, cfg, n)
	xs := src.frames(m, p)
	want := recordSteps(t, tr, xs, what, ready, pick)
	replay := func(ck []byte) (bool, int) { return replaysSame(t, p, cfg, ck, xs, want, pick, same) }
	if ok, k := replay(ck); !ok {
		t.Fatalf("p = %d, frame %d after restore: %s differs from the uninterrupted run", p, k, what)
	}
	return ck, replay
}

// modesLen returns the length of the modes section of the checkpoint ck
// of a tracker of p channels under cfg: the section stands between its
// u32 length and the checksum, at the end.
func modesLen(t *testing.T, p int, cfg Config, ck []byte) int {
	t.Helper()
	mb, err := restoreTracker(t, p, cfg, ck).ms.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	return len(mb)
}

// asVersion returns the checkpoint ck written as the older version v: the
// n bytes from at (the sections v lacks) cut out, the version and the
// checksum written again.
func asVersion(ck []byte, v uint16, at, n int) []byte {
	old := append(bytes.Clone(ck[:at]), ck[at+n:len(ck)-4]...)
	binary.LittleEndian.PutUint16(old[4:], v)
	return binary.LittleEndian.AppendUint32(old, crc32.ChecksumIEEE(old))
}

// refusesFloat checks that a tracker of p channels under cfg refuses, with
// ErrCheckpoint, the checkpoint ck with the float64 at byte off set to v
// (and the checksum written again); name says what the value is.
func refusesFloat(t *testing.T, p int, cfg Config, ck []byte, off int, v float64, name string) {
	t.Helper()
	bad := bytes.Clone(ck[:len(ck)-4])
	binary.LittleEndian.PutUint64(bad[off:], math.Float64bits(v))
	bad = binary.LittleEndian.AppendUint32(bad, crc32.ChecksumIEEE(bad))
	nt, err := New(p, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if err := nt.UnmarshalBinary(bad); !errors.Is(err, ErrCheckpoint) {
		t.Errorf("%s: want ErrCheckpoint, got %v", name, err)
	}
}

// The variance statistic's EWMA and normal levels travel in the checkpoint
// (version 4): a tracker restored mid-stream gives bit-identical R and V
// to an uninterrupted one. A version 3 checkpoint (no variance section)
// still loads and starts the statistic again from its levels at 1, which
// gives different V: the comparison this test makes can fail.
func TestCheckpointVarianceState(t *testing.T) {
	const p = 9
	cfg := stateCheckpointConfig()
	cfg.Residual, cfg.Variance = true, true
	type rv struct{ r, v, rl, vl float64 }
	ck, replay := replayCheck(t, p, cfg, 317, 300, "variance statistic", // mid-batch, between refreshes
		func(sc *Score) bool { return sc.VarianceLimit > 0 },
		func(sc *Score) rv { return rv{sc.Residual, sc.Variance, sc.ResidualLimit, sc.VarianceLimit} },
		func(a, b rv) bool {
			return math.Float64bits(a.r) == math.Float64bits(b.r) && math.Float64bits(a.v) == math.Float64bits(b.v) &&
				a.rl == b.rl && a.vl == b.vl
		})

	// The same state written as version 3: drop the variance section
	// (flag, then 3p floats, just before the modes).
	varAt := len(ck) - 4 - modesLen(t, p, cfg, ck) - 4 - 1 - 1 - 1 - 1 - (1 + 3*8*p) // then the MEWMA, persist, creep and level flags (versions 5–7, 9), 0 here
	if ck[varAt] != 1 || ck[varAt+1+3*8*p] != 0 || ck[varAt+3+3*8*p] != 0 {
		t.Fatalf("variance flag %d at byte %d, want 1, then MEWMA flag %d and creep flag %d, want 0", ck[varAt], varAt, ck[varAt+1+3*8*p], ck[varAt+3+3*8*p])
	}
	if same, _ := replay(asVersion(ck, 3, varAt, 1+3*8*p+1+1+1+1)); same {
		t.Error("a version 3 checkpoint (variance state dropped) gave the same variance statistic: the test cannot see the state")
	}

	// A corrupt normal level is refused.
	refusesFloat(t, p, cfg, ck, varAt+1+8*p, -1, "negative normal level")
}

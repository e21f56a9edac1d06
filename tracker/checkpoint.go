package tracker

import (
	"encoding/binary"
	"errors"
	"fmt"
	"hash/crc32"
	"hash/fnv"
	"math"
)

// ErrCheckpoint reports a checkpoint that cannot be restored.
var ErrCheckpoint = errors.New("tracker: bad checkpoint")

// Checkpoint format, version 6. All integers and floats little-endian:
//
//	"MWTK" | u16 version | u32 p | u64 config fingerprint (FNV-1a)
//	u8 flags (1 ready, 2 frozen, 4 baseline, 8 calibrated)
//	u64 frames | u64 learned | u32 since
//	u32 p0 (channels at New; those from p0 on were added by Grow)   [v2]
//	EW:    f64 μ | p × f64 mean | p × f64 variance | p × f64 count | p × f64 Σw²
//	       p(p+1)/2 × f64 covariance (upper triangle by rows)
//	       u32 nb | nb × f64 α (NaN: the frame's steps differ by channel)
//	       nb·p × f64 buffered deviations (frame by frame)
//	       per frame with α NaN: p × f64 per-channel steps               [v2]
//	flat:  p × f64 last value | p × u32 run length
//	model: p × u8 included | f64 n_eff | p(p+1)/2 × f64 correlation A (upper)
//	       (model present only when ready)
//	cal:   6 × f64 (T², SPE, φ limits and their scales)
//	lag:   u32 n | n × (f64 ratio | p × f64 values | p × u8 flags)       [v3]
//	       frames scored, not yet learned (Config.Lag), oldest first
//	var:   u8 present (Config.Variance) | p × f64 q | p × f64 ℓ | p × f64 n   [v4]
//	       the variance statistic's EWMA, normal level and frames behind it
//	       (restored into a tracker with the statistic off: ignored; into
//	       one with it on from a checkpoint without: started again)
//	mewma: u8 present (Config.Mewma) | p × f64 z̄                         [v5]
//	       the MEWMA statistic's smoothed frame (off: ignored; a checkpoint
//	       without: started again from z̄ = 0)
//	persist: u8 present (Config.Persist > 0) | p × f64 z̄ | p × f64 ℓ     [v6]
//	       | p × f64 n | f64 w | u32 frames since w: the persistence
//	       weight's smoothed frame, normal levels, last weight (off:
//	       ignored; a checkpoint without: z̄ = 0, no levels)
//	       | u8 copy present | u32 refreshes since it | p × u8 in model   [v8]
//	       | p(p+1)/2 × f64 rows of L: a wide unit's copy of the factor
//	       (persist.factor; without it a restored unit copies the
//	       restored model's)
//	creep: u8 present (Config.Creep) | p × f64 z̄ | p × f64 s̄ | p × f64 v  [v7]
//	       | p × f64 n | p × f64 normaliser: the creep statistic's
//	       smoothed frame, smoothed residuals, normal variances, evaluations
//	       behind them and normalisers 1/√Mᵢᵢ (all 0: formed at the next
//	       frame; off: ignored; a checkpoint without: started again from
//	       z̄ = 0 and the variance of independent frames)
//	level: u8 present (Config.LevelStep, frames in its ring) | u32 k    [v9]
//	       | u32 rows filled | u32 next row | u32 frames since the sums
//	       were formed | 2k·p × f64 ring | p × f64 ΣA | p × f64 ΣB
//	       | p × u32 frames read in a row | u32 evaluations since the
//	       normalisers | p × f64 normalisers 1/√Ωᵢᵢ (all 0: formed at the
//	       next evaluation): the level steps' window ring (off: ignored;
//	       another k, or a checkpoint without: empty)
//	modes: u32 n | n bytes of modes.Set.MarshalBinary
//	u32 CRC-32 (IEEE) of everything before
//
// Versions 1 (no p0, no per-channel steps), 2 (no lag section), 3 (no
// variance section: a restored variance statistic starts again from its
// EWMA and normal level at 1), 4 (no MEWMA section), 5 (no persist
// section), 6 (no creep section), 7 (no copy of the factor in the
// persist section) and 8 (no level section) are still read.
//
// The model snapshot (loadings, limits, per-channel data) is recomputed on
// restore from A and the restored modes by the same code as at the refresh,
// so it is bit-identical.
const (
	ckMagic   = "MWTK"
	ckVersion = 9
)

// fingerprint hashes the configuration fields that shape the state.
func (t *Tracker) fingerprint() uint64 {
	h := fnv.New64a()
	c := t.cfg
	fmt.Fprintf(h, "%d|%d|%v|%d|%d|%d|%d|%d|%d|%v|%d|%d|%v|%d|",
		c.Period, c.HalfLife, c.Alpha, c.RefreshEvery, c.WarmUp, c.Batch, c.T2Limit, c.SPELimit, c.RBCIndex,
		c.StuckRel, c.FlatFrames, c.TopContrib, c.Ridge, c.PatternCache)
	mc := t.ms.Config()
	fmt.Fprintf(h, "%d|%v|%d|%d|%v|%d|%d|%d|%d|%d|%v|", mc.Count, mc.Share, mc.MaxCount, mc.Deflation,
		mc.Tol, mc.MaxIter, mc.ColdEvery, mc.Start, mc.Refit, mc.EpsStages, mc.MatchMin)
	for _, s := range mc.Sparsity {
		fmt.Fprintf(h, "%s;", s)
	}
	if mc.MinCount != 0 {
		fmt.Fprintf(h, "min%d|", mc.MinCount) // absent when 0: older states keep their fingerprint
	}
	// Lag and Robust are left out: they shape how frames are learned, not
	// the state (a checkpoint's lag frames are checked against the ring).
	return h.Sum64()
}

// MarshalBinary writes the whole tracker state (statistics, batch buffer,
// learning state, model, empirical limits and the modes) in the versioned
// binary form above. It does not change the tracker.
func (t *Tracker) MarshalBinary() ([]byte, error) {
	mb, err := t.ms.MarshalBinary()
	if err != nil {
		return nil, fmt.Errorf("tracker: checkpoint: %w", err)
	}
	p := t.p
	e := t.ew
	b := make([]byte, 0, 64+8*(p*p+p*(10+e.capB))+len(mb))
	le := binary.LittleEndian
	f64 := func(v float64) { b = le.AppendUint64(b, math.Float64bits(v)) }
	b = append(b, ckMagic...)
	b = le.AppendUint16(b, ckVersion)
	b = le.AppendUint32(b, uint32(p))
	b = le.AppendUint64(b, t.fingerprint())
	var flags byte
	for i, f := range []bool{t.ready, t.frozen, t.baseline, t.cal} {
		if f {
			flags |= 1 << i
		}
	}
	b = append(b, flags)
	b = le.AppendUint64(b, t.frames)
	b = le.AppendUint64(b, t.learned)
	b = le.AppendUint32(b, uint32(t.since))
	b = le.AppendUint32(b, uint32(t.p0))
	f64(e.mu)
	for _, s := range [][]float64{e.mean, e.vari, e.count, e.sumW2} {
		for _, v := range s {
			f64(v)
		}
	}
	for i := 0; i < p; i++ {
		for _, v := range e.cov.Data[i*p+i : i*p+p] {
			f64(v)
		}
	}
	b = le.AppendUint32(b, uint32(e.nb))
	for _, v := range e.alphas[:e.nb] {
		f64(v)
	}
	for k := 0; k < e.nb; k++ {
		for i := 0; i < p; i++ {
			f64(e.rows[i*e.ldb+k])
		}
	}
	for k := 0; k < e.nb; k++ {
		if math.IsNaN(e.alphas[k]) {
			for i := 0; i < p; i++ {
				f64(e.al[i*e.ldb+k])
			}
		}
	}
	for _, v := range t.last {
		f64(v)
	}
	for _, v := range t.run {
		b = le.AppendUint32(b, uint32(v))
	}
	if t.ready {
		m := t.mdl
		for _, in := range m.include {
			if in {
				b = append(b, 1)
			} else {
				b = append(b, 0)
			}
		}
		f64(m.nEff)
		a := m.a.RawSymmetric()
		for i := 0; i < p; i++ {
			for _, v := range a.Data[i*a.Stride+i : i*a.Stride+p] {
				f64(v)
			}
		}
	}
	for _, v := range []float64{t.calT2, t.calSPE, t.calPhi, t.calScale[0], t.calScale[1], t.calScale[2]} {
		f64(v)
	}
	if l := t.lag; l != nil {
		b = le.AppendUint32(b, uint32(l.n))
		for k := 0; k < l.n; k++ {
			s := (l.head + k) % l.size
			f64(l.ratio[s])
			for _, v := range l.x[s*p : (s+1)*p] {
				f64(v)
			}
			b = append(b, l.flags[s*p:(s+1)*p]...)
		}
	} else {
		b = le.AppendUint32(b, 0)
	}
	if rs := t.rs; rs != nil && rs.vr {
		b = append(b, 1)
		for _, s := range [][]float64{rs.q, rs.lvl, rs.lvlN} {
			for _, v := range s {
				f64(v)
			}
		}
	} else {
		b = append(b, 0)
	}
	if mw := t.mw; mw != nil {
		b = append(b, 1)
		for _, v := range mw.zbar {
			f64(v)
		}
	} else {
		b = append(b, 0)
	}
	if ps := t.ps; ps != nil {
		b = append(b, 1)
		for _, s := range [][]float64{ps.zbar, ps.lvl, ps.lvlW} {
			for _, v := range s {
				f64(v)
			}
		}
		f64(ps.w)
		b = le.AppendUint32(b, uint32(ps.n))
		if g := ps.pin; g != nil && ps.pinRef >= 0 && t.rs != nil {
			b = append(b, 1)
			b = le.AppendUint32(b, uint32(t.rs.nref-ps.pinRef))
			for _, in := range g.inc[:p] {
				b = append(b, boolByte(in))
			}
			for i := 0; i < p; i++ {
				for _, v := range g.l[i*p : i*p+i+1] {
					f64(v)
				}
			}
		} else {
			b = append(b, 0)
		}
	} else {
		b = append(b, 0)
	}
	if cr := t.cr; cr != nil {
		b = append(b, 1)
		nrm := cr.nrm
		if !cr.nrmOK {
			nrm = make([]float64, p) // all 0: not formed
		}
		for _, s := range [][]float64{cr.zbar, cr.sbar, cr.v, cr.n, nrm} {
			for _, v := range s {
				f64(v)
			}
		}
	} else {
		b = append(b, 0)
	}
	if ls := t.lst; ls != nil && ls.n > 0 {
		b = append(b, 1)
		for _, v := range []int{ls.k, ls.n, ls.head, ls.since} {
			b = le.AppendUint32(b, uint32(v))
		}
		for _, s := range [][]float64{ls.ring, ls.sumA, ls.sumB} {
			for _, v := range s {
				f64(v)
			}
		}
		for _, v := range ls.seen {
			b = le.AppendUint32(b, uint32(v))
		}
		b = le.AppendUint32(b, uint32(ls.nrmAge))
		for _, v := range ls.nrm {
			if !ls.nrmOK {
				v = 0
			}
			f64(v)
		}
	} else {
		b = append(b, 0)
	}
	b = le.AppendUint32(b, uint32(len(mb)))
	b = append(b, mb...)
	b = le.AppendUint32(b, crc32.ChecksumIEEE(b))
	return b, nil
}

// flag reads the presence flag of an optional section: 0 or 1, anything
// else an error naming it; false once the reader has failed.
func (r *ckReader) flag(what string) (bool, error) {
	f := r.u8(what)
	if r.err == nil && f > 1 {
		return false, ckError("%s %d is neither 0 nor 1", what, f)
	}
	return r.err == nil && f == 1, nil
}

type ckReader struct {
	b   []byte
	off int
	err error
}

func (r *ckReader) need(n int, what string) bool {
	if r.err != nil {
		return false
	}
	if n < 0 || r.off+n > len(r.b) {
		r.err = fmt.Errorf("truncated at byte %d reading %s", r.off, what)
		return false
	}
	return true
}

func (r *ckReader) u8(what string) byte {
	if !r.need(1, what) {
		return 0
	}
	r.off++
	return r.b[r.off-1]
}

func (r *ckReader) u32(what string) uint32 {
	if !r.need(4, what) {
		return 0
	}
	r.off += 4
	return binary.LittleEndian.Uint32(r.b[r.off-4:])
}

func (r *ckReader) u64(what string) uint64 {
	if !r.need(8, what) {
		return 0
	}
	r.off += 8
	return binary.LittleEndian.Uint64(r.b[r.off-8:])
}

func (r *ckReader) f64(what string) float64 { return math.Float64frombits(r.u64(what)) }

func (r *ckReader) floats(dst []float64, what string) {
	if !r.need(8*len(dst), what) {
		return
	}
	for i := range dst {
		dst[i] = r.f64(what)
	}
}

// vectors reads a section of len(names) vectors of p floats each, every
// one named for the errors, into fresh slices.
func (r *ckReader) vectors(p int, names ...string) [][]float64 {
	vs := make([][]float64, len(names))
	for i, what := range names {
		vs[i] = make([]float64, p)
		r.floats(vs[i], what)
	}
	return vs
}

// UnmarshalBinary restores a state written by MarshalBinary into a tracker
// made by New with the same number of channels and the same Config. The
// data is checked completely (length, checksum, version, channel count,
// configuration, values) before anything changes; on an error wrapping
// ErrCheckpoint the tracker is unchanged. Feeding the restored tracker the
// same frames gives bit-identical scores.
func (t *Tracker) UnmarshalBinary(data []byte) error {
	st, err := t.decodeCheckpoint(data)
	if err != nil {
		return err
	}
	if err := st.check(); err != nil {
		return err
	}
	// Everything checked; the modes validate themselves before changing.
	if err := t.ms.UnmarshalBinary(st.modes); err != nil {
		return fmt.Errorf("%w: %w", ErrCheckpoint, err)
	}
	if st.ready() && t.ms.Count() == 0 {
		return ckError("the model is marked ready but the modes section holds no modes")
	}
	t.apply(st)
	return nil
}

// ckState is a decoded tracker checkpoint, not yet applied.
type ckState struct {
	p, p0, nb, since              int
	flags                         uint8
	frames, learned               uint64
	mean, vari, count, sumW2, cov []float64
	alphas, rows, al              []float64 // batch: steps, rows, per-channel steps (frame-major)
	last                          []float64
	run                           []int
	include                       []bool
	nEff                          float64
	a                             []float64 // correlation, upper triangle (ready only)
	cal                           [6]float64
	nLag                          int // frames scored, not yet learned (version ≥ 3)
	lagX, lagRatio                []float64
	lagFlags                      []byte
	vq, vl, vn                    []float64 // variance statistic (version ≥ 4; nil: start again)
	mz                            []float64 // MEWMA statistic's z̄ (version ≥ 5; nil: start again)
	pz, pl, pw                    []float64 // persistence weight (version ≥ 6; nil: start again)
	pWeight                       float64
	pN                            int
	cz, cs, cv, cn, cm            []float64 // creep statistic's z̄, s̄, v, n, normaliser (version ≥ 7; nil: start again)
	lk, ln, lhead, lsince         int       // level steps' window, rows, next row, since (version ≥ 9; lk 0: start again)
	lring, lsumA, lsumB           []float64
	lseen                         []int
	lnrm                          []float64
	lnrmAge                       int
	pAge                          int       // refreshes since the weight's copy of the factor (version ≥ 8)
	pInc                          []bool    // its channels in the model
	pL                            []float64 // its rows of L (nil: none)
	modes                         []byte
}

func (st *ckState) ready() bool { return st.flags&1 != 0 }

// ckError is an error wrapping ErrCheckpoint.
func ckError(format string, a ...any) error {
	return fmt.Errorf("%w: %s", ErrCheckpoint, fmt.Sprintf(format, a...))
}

// decodeCheckpoint checks the frame of a checkpoint (length, magic,
// version, checksum) and its fit to t (channel count, configuration,
// forgetting factor, batch and lag sizes), and decodes its fields.
func (t *Tracker) decodeCheckpoint(data []byte) (*ckState, error) {
	bad := ckError
	if len(data) < 4+2+4+8+4 {
		return nil, bad("%d bytes is too short for a tracker checkpoint", len(data))
	}
	if string(data[:4]) != ckMagic {
		return nil, bad("not a tracker checkpoint (magic %q)", data[:4])
	}
	version := binary.LittleEndian.Uint16(data[4:])
	if version < 1 || version > ckVersion {
		return nil, bad("version %d, this build reads versions 1 to %d", version, ckVersion)
	}
	body := data[:len(data)-4]
	if crc32.ChecksumIEEE(body) != binary.LittleEndian.Uint32(data[len(data)-4:]) {
		return nil, bad("checksum mismatch: the checkpoint is truncated or corrupt (%d bytes)", len(data))
	}
	r := &ckReader{b: body, off: 6}
	st := &ckState{}
	p := int(r.u32("channel count"))
	if r.err == nil && p != t.p {
		return nil, bad("written for %d channels, this tracker has %d", p, t.p)
	}
	st.p = p
	if fp := r.u64("config fingerprint"); r.err == nil && fp != t.fingerprint() {
		return nil, bad("written with a different configuration (fingerprint %016x, this tracker %016x)", fp, t.fingerprint())
	}
	st.flags = r.u8("flags")
	st.frames = r.u64("frame count")
	st.learned = r.u64("learned count")
	st.since = int(r.u32("frames since refresh"))
	st.p0 = p
	if version >= 2 {
		st.p0 = int(r.u32("initial channel count"))
		if r.err == nil && (st.p0 < 1 || st.p0 > p) {
			return nil, bad("initial channel count %d outside 1…%d", st.p0, p)
		}
	}
	mu := r.f64("forgetting factor")
	if r.err == nil && mu != t.ew.mu {
		return nil, bad("forgetting factor %v differs from this tracker's %v", mu, t.ew.mu)
	}
	st.mean, st.vari, st.count, st.sumW2 = make([]float64, p), make([]float64, p), make([]float64, p), make([]float64, p)
	r.floats(st.mean, "means")
	r.floats(st.vari, "variances")
	r.floats(st.count, "counts")
	r.floats(st.sumW2, "Kish sums")
	st.cov = make([]float64, p*(p+1)/2)
	r.floats(st.cov, "covariance")
	if err := t.decodeBatch(r, st, version); err != nil {
		return nil, err
	}
	st.last = make([]float64, p)
	r.floats(st.last, "last values")
	st.run = make([]int, p)
	for i := range st.run {
		st.run[i] = int(r.u32("run lengths"))
	}
	st.include = make([]bool, p)
	if st.ready() {
		for i := range st.include {
			st.include[i] = r.u8("model channels") == 1
		}
		st.nEff = r.f64("effective sample size")
		st.a = make([]float64, p*(p+1)/2)
		r.floats(st.a, "correlation")
	}
	r.floats(st.cal[:], "empirical limits")
	if version >= 3 {
		if err := t.decodeLag(r, st); err != nil {
			return nil, err
		}
	}
	if version >= 4 {
		has, err := r.flag("variance flag")
		if err != nil {
			return nil, err
		}
		if has {
			v := r.vectors(p, "variance EWMA", "variance normal levels", "variance level counts")
			st.vq, st.vl, st.vn = v[0], v[1], v[2]
		}
	}
	if version >= 5 {
		has, err := r.flag("MEWMA flag")
		if err != nil {
			return nil, err
		}
		if has {
			st.mz = r.vectors(p, "MEWMA smoothed frame")[0]
		}
	}
	if version >= 6 {
		has, err := r.flag("persist flag")
		if err != nil {
			return nil, err
		}
		if has {
			v := r.vectors(p, "persist smoothed frame", "persist levels", "persist level weights")
			st.pz, st.pl, st.pw = v[0], v[1], v[2]
			st.pWeight = r.f64("persist weight")
			st.pN = int(r.u32("persist frames"))
			if version >= 8 {
				if err := st.decodePersistCopy(r, p); err != nil {
					return nil, err
				}
			}
		}
	}
	if version >= 7 {
		has, err := r.flag("creep flag")
		if err != nil {
			return nil, err
		}
		if has {
			v := r.vectors(p, "creep smoothed frame", "creep smoothed residuals", "creep normal variances", "creep variance counts", "creep normalisers")
			st.cz, st.cs, st.cv, st.cn, st.cm = v[0], v[1], v[2], v[3], v[4]
		}
	}
	if version >= 9 {
		if err := st.decodeLevel(r, p); err != nil {
			return nil, err
		}
	}
	nm := int(r.u32("modes length"))
	if r.need(nm, "modes") {
		st.modes = r.b[r.off : r.off+nm]
		r.off += nm
	}
	if r.err != nil {
		return nil, bad("%v", r.err)
	}
	if r.off != len(body) {
		return nil, bad("%d unexpected trailing bytes", len(body)-r.off)
	}
	return st, nil
}

// decodeBatch decodes the pending batch of the covariance update: its
// length (at most the buffer), steps and rows.
func (t *Tracker) decodeBatch(r *ckReader, st *ckState, version uint16) error {
	p := st.p
	nb := int(r.u32("batch length"))
	if r.err == nil && (nb < 0 || nb > t.ew.capB) {
		return ckError("batch of %d frames exceeds the buffer of %d", nb, t.ew.capB)
	}
	st.nb = nb
	st.alphas = make([]float64, nb)
	r.floats(st.alphas, "batch steps")
	st.rows = make([]float64, nb*p)
	r.floats(st.rows, "batch rows")
	st.al = make([]float64, nb*p) // per-channel steps, frame by frame
	for k, a := range st.alphas {
		switch {
		case math.IsNaN(a) && version >= 2:
			r.floats(st.al[k*p:(k+1)*p], "per-channel batch steps")
			for _, v := range st.al[k*p : (k+1)*p] {
				if !(v >= 0 && v <= 1) && r.err == nil {
					return ckError("batch frame %d: step %v outside [0, 1]", k, v)
				}
			}
		case !(a >= 0 && a <= 1) && r.err == nil:
			return ckError("batch frame %d: step %v outside [0, 1]", k, a)
		}
	}
	return nil
}

// decodeLag decodes the frames scored but not yet learned (at most the
// tracker's lag).
func (t *Tracker) decodeLag(r *ckReader, st *ckState) error {
	p := st.p
	nLag := int(r.u32("lag frames"))
	size := 0
	if t.lag != nil {
		size = t.lag.size
	}
	if r.err == nil && (nLag < 0 || nLag > size) {
		return ckError("%d frames waiting to be learned, this tracker's lag is %d", nLag, size)
	}
	st.nLag = nLag
	st.lagX, st.lagFlags, st.lagRatio = make([]float64, nLag*p), make([]byte, nLag*p), make([]float64, nLag)
	for k := 0; k < nLag && r.err == nil; k++ {
		st.lagRatio[k] = r.f64("lag ratio")
		r.floats(st.lagX[k*p:(k+1)*p], "lag frame")
		if r.need(p, "lag flags") {
			copy(st.lagFlags[k*p:(k+1)*p], r.b[r.off:r.off+p])
			r.off += p
		}
	}
	return nil
}

// check refuses values no tracker writes: non-finite statistics and
// negative variances.
func (st *ckState) check() error {
	for name, s := range map[string][]float64{"mean": st.mean, "variance": st.vari, "count": st.count, "covariance": st.cov, "correlation": st.a} {
		for i, v := range s {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return ckError("%s value %d is %v", name, i, v)
			}
		}
	}
	for i, v := range st.vari {
		if v < 0 {
			return ckError("variance of channel %d is negative (%v)", i, v)
		}
	}
	for i := range st.vq {
		q, l, n := st.vq[i], st.vl[i], st.vn[i]
		if !(q >= 0) || math.IsInf(q, 0) || !(l > 0) || math.IsInf(l, 0) || !(n >= 0) || math.IsInf(n, 0) {
			return ckError("variance statistic of channel %d: EWMA %v, normal level %v, count %v", i, q, l, n)
		}
	}
	for i, v := range st.mz {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return ckError("MEWMA statistic of channel %d: smoothed value %v", i, v)
		}
	}
	if st.pz != nil && (!(st.pWeight >= 0 && st.pWeight <= 1) || st.pN < 0 || st.pN >= max(4, persistInterval(len(st.pz)))) {
		return ckError("persistence weight %v, %d frames since its evaluation", st.pWeight, st.pN)
	}
	if st.pL != nil {
		// Any age: the copy is taken again at the next evaluation once it
		// is persistInterval refreshes old (a checkpoint may fall between).
		if e := persistInterval(len(st.pz)); e == 1 {
			return ckError("persistence weight's copy of the factor for a unit of %d channels, which reads the current one", len(st.pz))
		}
		k := 0
		for i := range st.pz {
			for j := 0; j <= i; j++ {
				if v := st.pL[k]; math.IsNaN(v) || math.IsInf(v, 0) || (j == i && !(v > 0)) {
					return ckError("persistence weight's copy of the factor: row %d, column %d is %v", i, j, v)
				}
				k++
			}
		}
	}
	for i := range st.pz {
		z, l, w := st.pz[i], st.pl[i], st.pw[i]
		if math.IsNaN(z) || math.IsInf(z, 0) || !(l > 0) || math.IsInf(l, 0) || !(w >= 0) || math.IsInf(w, 0) {
			return ckError("persistence weight of channel %d: smoothed value %v, level %v, weight %v", i, z, l, w)
		}
	}
	for i := range st.cz {
		z, sb, v, n, nm := st.cz[i], st.cs[i], st.cv[i], st.cn[i], st.cm[i]
		if math.IsNaN(z) || math.IsInf(z, 0) || math.IsNaN(sb) || math.IsInf(sb, 0) || !(v > 0) || math.IsInf(v, 0) ||
			!(n >= 0) || math.IsInf(n, 0) || !(nm >= 0) || math.IsInf(nm, 0) {
			return ckError("creep statistic of channel %d: smoothed value %v, residual %v, normal variance %v, count %v, normaliser %v", i, z, sb, v, n, nm)
		}
	}
	return nil
}

// apply installs a decoded and checked checkpoint (its modes already
// restored into t.ms).
func (t *Tracker) apply(st *ckState) {
	p := st.p
	e := t.ew
	copy(e.mean, st.mean)
	copy(e.vari, st.vari)
	copy(e.count, st.count)
	copy(e.sumW2, st.sumW2)
	k := 0
	for i := 0; i < p; i++ {
		for j := i; j < p; j++ {
			e.cov.Data[i*p+j] = st.cov[k]
			k++
		}
	}
	e.nb = st.nb
	copy(e.alphas, st.alphas)
	for k := 0; k < st.nb; k++ {
		for i := 0; i < p; i++ {
			e.rows[i*e.ldb+k] = st.rows[k*p+i]
			e.al[i*e.ldb+k] = st.al[k*p+i]
		}
	}
	t.p0 = st.p0
	copy(t.last, st.last)
	copy(t.run, st.run)
	t.frames, t.learned = st.frames, st.learned
	t.frozen, t.baseline = st.flags&2 != 0, st.flags&4 != 0
	t.ready = false
	if st.ready() {
		m := t.mdl
		copy(m.include, st.include)
		raw := m.a.RawSymmetric()
		k = 0
		for i := 0; i < p; i++ {
			for j := i; j < p; j++ {
				raw.Data[i*raw.Stride+j] = st.a[k]
				k++
			}
		}
		t.install(st.nEff)
	}
	if l := t.lag; l != nil {
		copy(l.x, st.lagX)
		copy(l.flags, st.lagFlags)
		copy(l.ratio, st.lagRatio)
		l.head, l.n = 0, st.nLag
	}
	if rs := t.rs; rs != nil && rs.vr {
		if st.vq != nil {
			copy(rs.q, st.vq)
			copy(rs.lvl, st.vl)
			copy(rs.lvlN, st.vn)
		} else {
			for i := range rs.q {
				rs.q[i], rs.lvl[i], rs.lvlN[i] = 1, 1, 0
			}
		}
	}
	if mw := t.mw; mw != nil {
		clear(mw.zbar)
		copy(mw.zbar, st.mz)
	}
	if ps := t.ps; ps != nil {
		clear(ps.zbar)
		clear(ps.lvlW)
		for i := range ps.lvl {
			ps.lvl[i] = 1
		}
		copy(ps.zbar, st.pz)
		copy(ps.lvl, st.pl)
		copy(ps.lvlW, st.pw)
		ps.w, ps.n, ps.pinRef = 1, 0, -1
		if st.pz != nil {
			// Versions 6 and 7 formed the weight every 4 frames at any width.
			ps.w, ps.n = st.pWeight, st.pN%ps.every
		}
		if g := ps.pin; g != nil && st.pL != nil && t.rs != nil {
			k := 0
			for i := 0; i < p; i++ {
				copy(g.l[i*p:i*p+i+1], st.pL[k:k+i+1])
				k += i + 1
			}
			if g.pk != nil {
				packLower(g.pk, g.l, p)
			}
			copy(g.inc, st.pInc)
			g.diag = false
			ps.pinRef = t.rs.nref - st.pAge
		}
	}
	if cr := t.cr; cr != nil {
		if st.cz != nil {
			copy(cr.zbar, st.cz)
			copy(cr.sbar, st.cs)
			copy(cr.v, st.cv)
			copy(cr.n, st.cn)
			copy(cr.nrm, st.cm)
			cr.limPin, cr.nrmOK = -1, false
			for _, x := range st.cm {
				cr.nrmOK = cr.nrmOK || x > 0
			}
		} else {
			clear(cr.zbar)
			clear(cr.sbar)
			cr.prior()
		}
	}
	if ls := t.lst; ls != nil {
		ls.reset()
		if st.lk == ls.k && len(st.lring) == len(ls.ring) {
			copy(ls.ring, st.lring)
			copy(ls.sumA, st.lsumA)
			copy(ls.sumB, st.lsumB)
			copy(ls.seen, st.lseen)
			ls.n, ls.head, ls.since = st.ln, st.lhead, st.lsince
			copy(ls.nrm, st.lnrm)
			ls.nrmAge = st.lnrmAge
			for _, x := range st.lnrm {
				ls.nrmOK = ls.nrmOK || x > 0
			}
		}
	}
	t.since = st.since
	t.cal = st.flags&8 != 0
	t.calT2, t.calSPE, t.calPhi = st.cal[0], st.cal[1], st.cal[2]
	t.calScale = [3]float64{st.cal[3], st.cal[4], st.cal[5]}
}

// decodeLevel reads the level steps' section (version 9): its window k
// (at most MaxLevelStepFrames, so the ring's size is bounded by p), the
// ring's position, the ring, the sums and the read runs.
func (st *ckState) decodeLevel(r *ckReader, p int) error {
	has, err := r.flag("level flag")
	if err != nil || !has {
		return err
	}
	k, n, head, since := int(r.u32("level window")), int(r.u32("level rows")), int(r.u32("level next row")), int(r.u32("level since"))
	if r.err != nil {
		return ckError("%v", r.err)
	}
	if k < 1 || k > MaxLevelStepFrames || n < 1 || n > 2*k || head >= 2*k || since > 2*k {
		return ckError("level steps: window %d, rows %d, next row %d, since %d (window 1 to %d, rows 1 to 2·window)", k, n, head, since, MaxLevelStepFrames)
	}
	if !r.need(8*(2*k*p+3*p)+4*p+4, "level ring") {
		return ckError("%v", r.err)
	}
	st.lk, st.ln, st.lhead, st.lsince = k, n, head, since
	st.lring = make([]float64, 2*k*p)
	r.floats(st.lring, "level ring")
	v := r.vectors(p, "level sum A", "level sum B")
	st.lsumA, st.lsumB = v[0], v[1]
	st.lseen = make([]int, p)
	for i := range st.lseen {
		st.lseen[i] = int(r.u32("level read run"))
		if st.lseen[i] > 2*k {
			return ckError("level steps: channel %d read for %d frames in a row, more than 2·window %d", i, st.lseen[i], 2*k)
		}
	}
	st.lnrmAge = int(r.u32("level normaliser age"))
	st.lnrm = r.vectors(p, "level normalisers")[0]
	for _, s := range [][]float64{st.lring, st.lsumA, st.lsumB} {
		for i, x := range s {
			if math.IsNaN(x) || math.IsInf(x, 0) {
				return ckError("level steps: value %d is %v", i, x)
			}
		}
	}
	for i, x := range st.lnrm {
		if !(x >= 0) || math.IsInf(x, 0) {
			return ckError("level steps: normaliser of channel %d is %v", i, x)
		}
	}
	if st.lnrmAge > creepNormEvery {
		return ckError("level steps: normalisers %d evaluations old, at most %d", st.lnrmAge, creepNormEvery)
	}
	return nil
}

// decodePersistCopy reads the persistence weight's copy of the factor
// (version 8): a flag, then its age in refreshes, its channels in the
// model and the rows of L.
func (st *ckState) decodePersistCopy(r *ckReader, p int) error {
	has, err := r.flag("persist copy flag")
	if err != nil || !has {
		return err
	}
	st.pAge = int(r.u32("persist copy age"))
	st.pInc = make([]bool, p)
	for i := range st.pInc {
		v := r.u8("persist copy channels")
		if r.err == nil && v > 1 {
			return ckError("persistence weight's copy of the factor: channel %d flag %d is neither 0 nor 1", i, v)
		}
		st.pInc[i] = v == 1
	}
	st.pL = make([]float64, p*(p+1)/2)
	r.floats(st.pL, "persist copy factor")
	return nil
}

// boolByte is 1 for true, 0 for false.
func boolByte(b bool) byte {
	if b {
		return 1
	}
	return 0
}

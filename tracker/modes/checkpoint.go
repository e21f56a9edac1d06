package modes

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"math"
	"slices"
)

// Checkpoint format, version 1 (all integers and floats little-endian):
//
//	"MWMD" | u16 version | u32 p | u32 r | u64 nextID | u64 refreshes | f64 trace | u8 deflation
//	r × { u64 id | u8 flags (1 converged, 2 cold, 4 warm start differs) | u32 iterations
//	      | u32 refit iterations | f64 deflated variance | f64 objective | f64 gap
//	      | sparse loadings | [flag 4: sparse warm start (the iterate before the refit)] }
//	sparse vector: u32 nnz | nnz × (u32 index, f64 value), indices ascending, unit norm
//	r(r+1)/2 × f64: VᵀAV, upper triangle by rows
//	u32 CRC-32 (IEEE) of everything before
const (
	checkpointMagic   = "MWMD"
	checkpointVersion = 1
)

// MarshalBinary encodes the current modes (loadings, identities, variances
// and the counters needed to continue) for a checkpoint. The configuration
// is not included: restore into a Set built with the same p.
func (t *Set) MarshalBinary() ([]byte, error) {
	s := t.cur
	r := s.r
	m := t.cfg.MaxCount
	b := make([]byte, 0, 64+r*(40+16*t.p)+8*r*r)
	b = append(b, checkpointMagic...)
	b = binary.LittleEndian.AppendUint16(b, checkpointVersion)
	b = binary.LittleEndian.AppendUint32(b, uint32(t.p))
	b = binary.LittleEndian.AppendUint32(b, uint32(r))
	b = binary.LittleEndian.AppendUint64(b, uint64(t.nextID))
	b = binary.LittleEndian.AppendUint64(b, uint64(t.refreshes))
	b = binary.LittleEndian.AppendUint64(b, math.Float64bits(t.trace))
	b = append(b, byte(t.cfg.Deflation))
	for j := 0; j < r; j++ {
		res := s.res[j]
		var flags byte
		if res.Converged {
			flags |= 1
		}
		if res.Cold {
			flags |= 2
		}
		if !slices.Equal(s.x[j], s.pre[j]) {
			flags |= 4
		}
		b = binary.LittleEndian.AppendUint64(b, uint64(s.id[j]))
		b = append(b, flags)
		b = binary.LittleEndian.AppendUint32(b, uint32(res.Iterations))
		b = binary.LittleEndian.AppendUint32(b, uint32(res.RefitIterations))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(res.Variance))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(res.Objective))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(res.Gap))
		b = appendSparse(b, s.x[j])
		if flags&4 != 0 {
			b = appendSparse(b, s.pre[j])
		}
	}
	for i := 0; i < r; i++ {
		for j := i; j < r; j++ {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(s.g[i*m+j]))
		}
	}
	b = binary.LittleEndian.AppendUint32(b, crc32.ChecksumIEEE(b))
	return b, nil
}

// UnmarshalBinary restores modes written by MarshalBinary. The data is
// checked completely (checksum, version, dimension, indices, finite unit
// loadings, identities) before anything changes; on an error, wrapping
// ErrCheckpoint and naming the offending field, the Set is unchanged.
// The next Refresh warm-starts from the restored modes.
func (t *Set) UnmarshalBinary(data []byte) error {
	bad := func(format string, a ...any) error {
		return fmt.Errorf("%w: %s", ErrCheckpoint, fmt.Sprintf(format, a...))
	}
	if len(data) < 4+2+4 {
		return bad("%d bytes is too short", len(data))
	}
	if string(data[:4]) != checkpointMagic {
		return bad("not a modes checkpoint (magic %q)", data[:4])
	}
	if v := binary.LittleEndian.Uint16(data[4:]); v != checkpointVersion {
		return bad("version %d, this build reads version %d", v, checkpointVersion)
	}
	body, sum := data[:len(data)-4], binary.LittleEndian.Uint32(data[len(data)-4:])
	if crc32.ChecksumIEEE(body) != sum {
		return bad("checksum mismatch (corrupt or truncated)")
	}
	d := decoder{b: body, off: 6}
	p := int(d.u32())
	r := int(d.u32())
	nextID := d.u64()
	refreshes := d.u64()
	trace := d.f64()
	defl := d.u8()
	if d.err != nil {
		return bad("header: %v", d.err)
	}
	if p != t.p {
		return bad("dimension p = %d, mode set has p = %d", p, t.p)
	}
	if r > t.slots {
		return bad("%d modes, mode set holds at most %d", r, t.slots)
	}
	if Deflation(defl) != t.cfg.Deflation {
		return bad("written with %s deflation, mode set uses %s", Deflation(defl), t.cfg.Deflation)
	}
	if nextID > math.MaxInt32 || refreshes > math.MaxInt32 || !(trace >= 0) || math.IsInf(trace, 0) {
		return bad("header counters out of range")
	}
	s, m := t.nxt, t.cfg.MaxCount
	for j := 0; j < r; j++ {
		id := d.u64()
		flags := d.u8()
		it, rit := d.u32(), d.u32()
		res := Result{Variance: d.f64(), Objective: d.f64(), Gap: d.f64(),
			Iterations: int(it), RefitIterations: int(rit),
			Converged: flags&1 != 0, Cold: flags&2 != 0}
		if d.err != nil {
			return bad("mode %d: %v", j+1, d.err)
		}
		if id == 0 || id > nextID {
			return bad("mode %d: id %d outside [1, %d]", j+1, id, nextID)
		}
		for i := 0; i < j; i++ {
			if uint64(s.id[i]) == id {
				return bad("mode %d: id %d repeated", j+1, id)
			}
		}
		var err error
		if s.supp[j], err = d.sparse(s.x[j], s.supp[j][:0]); err != nil {
			return bad("mode %d: loadings: %v", j+1, err)
		}
		if flags&4 != 0 {
			if t.bpreS, err = d.sparse(s.pre[j], t.bpreS[:0]); err != nil {
				return bad("mode %d: warm start: %v", j+1, err)
			}
		} else {
			copy(s.pre[j], s.x[j])
		}
		s.id[j] = int(id)
		s.res[j] = res
	}
	for i := 0; i < r; i++ {
		for j := i; j < r; j++ {
			v := d.f64()
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return bad("VᵀAV[%d,%d] = %g", i, j, v)
			}
			s.g[i*m+j], s.g[j*m+i] = v, v
		}
	}
	if d.err != nil {
		return bad("VᵀAV: %v", d.err)
	}
	if d.off != len(body) {
		return bad("%d trailing bytes", len(body)-d.off)
	}
	for j := 0; j < r; j++ {
		s.vari[j] = s.g[j*m+j]
		s.adj[j] = cholColumn(s.rch, s.g, m, j)
	}
	s.r = r
	raw := s.v.RawMatrix()
	for i := 0; i < p; i++ {
		for j := 0; j < m; j++ {
			raw.Data[i*raw.Stride+j] = 0
		}
	}
	for j := 0; j < r; j++ {
		for _, i := range s.supp[j] {
			raw.Data[i*raw.Stride+j] = s.x[j][i]
		}
	}
	t.cur, t.nxt = s, t.cur
	t.undo = setUndo{}
	t.have = r > 0
	t.coldNext = false
	t.nextID = int(nextID)
	t.refreshes = int(refreshes)
	t.trace = trace
	return nil
}

type decoder struct {
	b   []byte
	off int
	err error
}

func (d *decoder) take(n int) []byte {
	if d.err != nil {
		return nil
	}
	if d.off+n > len(d.b) {
		d.err = fmt.Errorf("truncated at byte %d", d.off)
		return nil
	}
	s := d.b[d.off : d.off+n]
	d.off += n
	return s
}

func (d *decoder) u8() byte {
	if s := d.take(1); s != nil {
		return s[0]
	}
	return 0
}

func (d *decoder) u32() uint32 {
	if s := d.take(4); s != nil {
		return binary.LittleEndian.Uint32(s)
	}
	return 0
}

func (d *decoder) u64() uint64 {
	if s := d.take(8); s != nil {
		return binary.LittleEndian.Uint64(s)
	}
	return 0
}

func (d *decoder) f64() float64 { return math.Float64frombits(d.u64()) }

func appendSparse(b []byte, x []float64) []byte {
	n := 0
	for _, v := range x {
		if v != 0 {
			n++
		}
	}
	b = binary.LittleEndian.AppendUint32(b, uint32(n))
	for i, v := range x {
		if v != 0 {
			b = binary.LittleEndian.AppendUint32(b, uint32(i))
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
		}
	}
	return b
}

// sparse reads a sparse unit vector into dst (length p, zeroed here) and
// appends its indices to supp.
func (d *decoder) sparse(dst []float64, supp []int) ([]int, error) {
	p := len(dst)
	for i := range dst {
		dst[i] = 0
	}
	nnz := int(d.u32())
	if d.err != nil {
		return supp, d.err
	}
	if nnz > p || nnz == 0 {
		return supp, fmt.Errorf("%d nonzero entries for p = %d", nnz, p)
	}
	var norm float64
	for k := 0; k < nnz; k++ {
		i, v := int(d.u32()), d.f64()
		if d.err != nil {
			return supp, fmt.Errorf("entry %d: %w", k, d.err)
		}
		if i >= p || (k > 0 && i <= supp[len(supp)-1]) {
			return supp, fmt.Errorf("entry %d: index %d out of order or range", k, i)
		}
		if math.IsNaN(v) || math.IsInf(v, 0) || v == 0 {
			return supp, fmt.Errorf("entry %d: value %g", k, v)
		}
		dst[i] = v
		supp = append(supp, i)
		norm += v * v
	}
	if math.Abs(norm-1) > 1e-9 {
		return supp, fmt.Errorf("squared norm %g, want 1", norm)
	}
	return supp, nil
}

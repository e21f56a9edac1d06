package tracker

// MaxLag bounds Config.Lag (frames): the ring holds Lag frames of p values
// and flags, allocated in New.
const MaxLag = 10000

// Flags of a frame in the lag ring.
const (
	lagObserved = 1 << iota
	lagStuck
	lagMasked
)

// lagRing holds the frames scored but not yet learned (Config.Lag): N-step
// ahead scoring (Wang, Kruger & Irwin 2005, "Process monitoring approach
// using fast moving window PCA", Ind. Eng. Chem. Res. 44(15)): the model
// that scores a frame lags the newest data by N frames, so that a slow
// drift meets a model that has not yet followed it. All storage is
// allocated in New; a frame is copied in and the oldest copied out.
type lagRing struct {
	p, n, head, size int
	x                []float64 // size × p
	flags            []byte    // size × p
	ratio            []float64 // size: φ over its limit when scored
	out              []float64 // p: the frame taken out
	outFlags         []byte    // p: its flags
	mask             []bool    // p: its mask
}

// newLagRing returns the ring of lag frames of p channels, nil for lag 0.
func newLagRing(p, lag int) *lagRing {
	if lag <= 0 {
		return nil
	}
	return &lagRing{p: p, size: lag, x: make([]float64, lag*p), flags: make([]byte, lag*p),
		ratio: make([]float64, lag), out: make([]float64, p), outFlags: make([]byte, p), mask: make([]bool, p)}
}

// reset empties the ring (nil-safe).
func (l *lagRing) reset() {
	if l != nil {
		l.n, l.head = 0, 0
	}
}

// put stores a frame (x, its mask, its ratio r and the flags t.obs and
// t.stuck) in slot s.
func (l *lagRing) put(s int, t *Tracker, x []float64, mask []bool, r float64) {
	p := l.p
	copy(l.x[s*p:(s+1)*p], x)
	l.ratio[s] = r
	fl := l.flags[s*p : (s+1)*p]
	for i := range fl {
		var f byte
		if t.obs[i] {
			f |= lagObserved
		}
		if t.stuck[i] {
			f |= lagStuck
		}
		if mask != nil && mask[i] {
			f |= lagMasked
		}
		fl[i] = f
	}
}

// swap puts the frame just scored (x, its mask, its ratio r and the
// tracker's flags t.obs and t.stuck for it) into the ring and, once the
// ring is full, takes out the frame scored lag frames before: it returns
// that frame, its mask (nil: none) and ratio, and sets t.obs and t.stuck to
// its flags; ok is false while the ring is still filling.
func (l *lagRing) swap(t *Tracker, x []float64, mask []bool, r float64) (xo []float64, mo []bool, ro float64, ok bool) {
	p := l.p
	if l.n < l.size {
		l.put((l.head+l.n)%l.size, t, x, mask, r)
		l.n++
		return nil, nil, 0, false
	}
	s := l.head
	copy(l.out, l.x[s*p:(s+1)*p])
	copy(l.outFlags, l.flags[s*p:(s+1)*p])
	ro = l.ratio[s]
	l.put(s, t, x, mask, r)
	l.head = (l.head + 1) % l.size
	any := false
	for i, f := range l.outFlags {
		t.obs[i] = f&lagObserved != 0
		t.stuck[i] = f&lagStuck != 0
		l.mask[i] = f&lagMasked != 0
		any = any || l.mask[i]
	}
	mo = l.mask
	if !any {
		mo = nil
	}
	return l.out, mo, ro, true
}

// grown returns the ring for p2 ≥ p channels and lag frames, keeping the
// frames waiting when the lag is unchanged (the new channels missing in
// them); nil-safe.
func (l *lagRing) grown(p2, lag int) *lagRing {
	g := newLagRing(p2, lag)
	if l == nil || g == nil || lag != l.size {
		return g
	}
	for k := 0; k < l.n; k++ {
		s := (l.head + k) % l.size
		copy(g.x[k*p2:k*p2+l.p], l.x[s*l.p:(s+1)*l.p])
		copy(g.flags[k*p2:k*p2+l.p], l.flags[s*l.p:(s+1)*l.p])
		g.ratio[k] = l.ratio[s]
	}
	g.n = l.n
	return g
}

package sim

import (
	"bytes"
	"compress/gzip"
	"crypto/sha256"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/stat"
)

// shortDemo is the demo scenario cut to its first hours, for fast tests.
func shortDemo(t testing.TB, d time.Duration) *Scenario {
	t.Helper()
	s, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	return s.Head(d)
}

func lpBytes(t testing.TB, s *Scenario) []byte {
	t.Helper()
	var b bytes.Buffer
	if err := s.WriteLineProtocol(&b); err != nil {
		t.Fatal(err)
	}
	return b.Bytes()
}

// TestSameSeedSameBytes: the output is a function of the scenario alone.
func TestSameSeedSameBytes(t *testing.T) {
	s := shortDemo(t, 2*time.Hour)
	a, b := sha256.Sum256(lpBytes(t, s)), sha256.Sum256(lpBytes(t, s))
	if a != b {
		t.Fatal("two runs of the same scenario differ")
	}
	s2 := s.Clone()
	s2.Seed++
	if c := sha256.Sum256(lpBytes(t, s2)); c == a {
		t.Fatal("a different seed gave the same bytes")
	}

	// Files, plain and gzipped: same bytes across runs, and the gzip stream
	// decompresses to the plain file.
	d1, d2 := t.TempDir(), t.TempDir()
	read := func(p string) []byte {
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	f1, err := s.WriteFiles(d1, true)
	if err != nil {
		t.Fatal(err)
	}
	f2, err := s.WriteFiles(d2, true)
	if err != nil {
		t.Fatal(err)
	}
	if filepath.Base(f1.Readings) != "readings.lp.gz" || filepath.Base(f1.Truth) != "truth.json" {
		t.Errorf("file names %v", f1)
	}
	if !bytes.Equal(read(f1.Readings), read(f2.Readings)) || !bytes.Equal(read(f1.Truth), read(f2.Truth)) {
		t.Error("gzip files differ between runs")
	}
	zr, err := gzip.NewReader(bytes.NewReader(read(f1.Readings)))
	if err != nil {
		t.Fatal(err)
	}
	plain, err := io.ReadAll(zr)
	if err != nil {
		t.Fatal(err)
	}
	fp, err := s.WriteFiles(d1, false)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(plain, read(fp.Readings)) {
		t.Error("gunzipped readings differ from the plain file")
	}
}

// TestLineProtocolRoundTrip decodes the output with the lineprotocol Decoder
// and checks it against the scenario: measurement = unit, tag asset, one
// field per present channel with the generator's exact value, timestamps
// within ±jitter of the nominal sample time.
func TestLineProtocolRoundTrip(t *testing.T) {
	s := shortDemo(t, time.Hour)
	s.Dropout = 0.05 // exercise missing fields
	out := lpBytes(t, s)
	g, err := s.NewGenerator()
	if err != nil {
		t.Fatal(err)
	}
	infos := s.Channels()
	dec := lineprotocol.NewDecoderWithBytes(out)
	lines, missing := 0, 0
	for g.Step() {
		vals := g.Values()
		ci := 0
		for _, u := range s.Units {
			for _, a := range u.Assets {
				first := ci
				present := 0
				for range a.Channels {
					if !math.IsNaN(vals[ci]) {
						present++
					} else {
						missing++
					}
					ci++
				}
				if present == 0 {
					continue
				}
				if !dec.Next() {
					t.Fatalf("output ends early at sample %d: %v", g.Index(), dec.Err())
				}
				lines++
				m, err := dec.Measurement()
				if err != nil || string(m) != u.Name {
					t.Fatalf("measurement %q (%v), want %q", m, err, u.Name)
				}
				k, v, err := dec.NextTag()
				if err != nil || string(k) != "asset" || string(v) != a.Name {
					t.Fatalf("tag %s=%s (%v), want asset=%s", k, v, err, a.Name)
				}
				if k, _, _ := dec.NextTag(); k != nil {
					t.Fatalf("unexpected second tag %s", k)
				}
				for j := first; j < ci; j++ {
					if math.IsNaN(vals[j]) {
						continue
					}
					key, val, err := dec.NextField()
					if err != nil {
						t.Fatal(err)
					}
					if string(key) != infos[j].Field || val.Kind() != lineprotocol.Float || val.FloatV() != vals[j] {
						t.Fatalf("%s at %v: field %s=%v, want %s=%v", infos[j].Name, g.Time(), key, val, infos[j].Field, vals[j])
					}
				}
				if key, _, _ := dec.NextField(); key != nil {
					t.Fatalf("unexpected field %s", key)
				}
				ts, err := dec.Time(lineprotocol.Nanosecond, time.Time{})
				if err != nil {
					t.Fatal(err)
				}
				if d := ts.Sub(g.Time()); d < -s.Jitter || d > s.Jitter {
					t.Fatalf("timestamp %v is %v from nominal %v (jitter %v)", ts, d, g.Time(), s.Jitter)
				}
			}
		}
	}
	if dec.Next() {
		t.Fatal("output has lines after the last sample")
	}
	// Random dropouts: binomial proportion, 4 standard errors.
	n := float64(s.Samples() * len(infos))
	p := float64(missing) / n
	if se := math.Sqrt(0.05 * 0.95 / n); math.Abs(p-0.05) > 4*se {
		t.Errorf("missing fraction %.4f, want 0.05 ± %.4f", p, 4*se)
	}
	t.Logf("%d lines, %d values missing", lines, missing)
}

const faultBase = `
seed: 99
start: 2026-02-01T00:00:00Z
duration: 6h
period: 10s
jitter: 200ms
dropout: 0.01
drivers:
  - {name: load, mean: 0.5, daily: {amplitude: 0.2, peak: 14h}, walk: {sigma: 0.05, tau: 20m}}
  - {name: speed, mean: 1000, steps: {levels: [-50, 0, 50], hold: 1h}}
units:
  - name: u1
    assets:
      - name: a
        channels:
          - {name: p, eng_unit: m, base: 10, noise: 0.5, terms: {load: 20}}
          - {name: q, eng_unit: m, base: 5, noise: 0.3, terms: {load: -10}}
          - {name: r, eng_unit: m, base: 1, noise: 0.1, wander: {sigma: 0.2, tau: 30m}}
      - name: b
        channels:
          - {name: s, eng_unit: m, base: 30, noise: 0.4, terms: {speed: 0.02, load: 6}}
          - {name: t, eng_unit: m, base: 3, noise: 0.2, terms: {load: 4}}
  - name: u2
    assets:
      - name: c
        channels:
          - {name: v, eng_unit: m, base: 7, noise: 0.3, terms: {speed: 0.01}}
          - {name: w, eng_unit: m, base: 2, noise: 0.1, terms: {load^2: 5}}
`

// TestFaultsChangeOnlyTheirChannels generates the scenario with and without
// one episode (same seed) and checks that exactly the named channels change,
// only inside the episode, and in the way the kind prescribes.
func TestFaultsChangeOnlyTheirChannels(t *testing.T) {
	base, err := LoadBytes("faults.yaml", []byte(faultBase))
	if err != nil {
		t.Fatal(err)
	}
	from, to := base.Start.Add(2*time.Hour), base.Start.Add(4*time.Hour)
	const res = 1e-3 // both runs are rounded to 3 decimals
	cases := []struct {
		ep Episode
		// check is called for every sample inside the episode with the
		// channel's position in ep.Channels, the value with and without the
		// episode, the elapsed fraction and the load deviation.
		check func(t *testing.T, pos int, with, without, frac, load float64)
		// after is called once with the collected differences (with - without)
		// of the first named channel, NaNs dropped.
		after func(t *testing.T, diffs []float64)
	}{
		{ep: Episode{Kind: Bias, Channels: []string{"u1.a.p"}, Size: 5},
			check: func(t *testing.T, _ int, w, wo, _, _ float64) {
				if math.Abs(w-wo-5) > res {
					t.Fatalf("bias: %v - %v ≠ 5", w, wo)
				}
			}},
		{ep: Episode{Kind: Drift, Channels: []string{"u1.a.q"}, Size: 3},
			check: func(t *testing.T, _ int, w, wo, f, _ float64) {
				if math.Abs(w-wo-3*f) > res {
					t.Fatalf("drift at %.3f: %v - %v ≠ %v", f, w, wo, 3*f)
				}
			}},
		{ep: Episode{Kind: Stuck, Channels: []string{"u1.b.s", "u2.c.v"}},
			after: func(t *testing.T, d []float64) {
				if stat.Variance(d, nil) == 0 {
					t.Fatal("stuck: the difference to the live value does not vary")
				}
			}},
		{ep: Episode{Kind: Noise, Channels: []string{"u2.c.v"}, Factor: 5},
			after: func(t *testing.T, d []float64) {
				// Added noise has σ·√(F²-1) = 0.3·√24; SE of a sample σ is
				// σ/√(2n) (normal theory, common practice); 4 SE.
				want, got := 0.3*math.Sqrt(24), stat.StdDev(d, nil)
				if tol := 4 * want / math.Sqrt(2*float64(len(d))); math.Abs(got-want) > tol {
					t.Fatalf("noise: σ of added noise %v, want %v ± %v", got, want, tol)
				}
			}},
		{ep: Episode{Kind: Spikes, Channels: []string{"u2.c.w"}, Size: 50, Rate: 30},
			after: func(t *testing.T, d []float64) {
				n := 0
				for _, x := range d {
					switch {
					case math.Abs(math.Abs(x)-50) <= res:
						n++
					case math.Abs(x) > res:
						t.Fatalf("spikes: difference %v is neither 0 nor ±50", x)
					}
				}
				// Binomial count: 720 samples × p = 30/h·10 s; 4 SD.
				m := float64(len(d)) * 30.0 / 360
				if sd := math.Sqrt(m); math.Abs(float64(n)-m) > 4*sd {
					t.Fatalf("spikes: %d spikes, want %.0f ± %.0f", n, m, 4*sd)
				}
			}},
		{ep: Episode{Kind: Dropout, Channels: []string{"u1.a.r", "u2.c.w"}},
			check: func(t *testing.T, _ int, w, _, _, _ float64) {
				if !math.IsNaN(w) {
					t.Fatal("dropout: value present")
				}
			}},
		{ep: Episode{Kind: Relation, Channels: []string{"u1.b.t", "u1.b.s", "u1.a.p"}, Driver: "load", Size: 0.1, Ramp: 30 * time.Minute},
			check: func(t *testing.T, pos int, w, wo, f, _ float64) {
				// The first channel sees load lower by the ramped size, the
				// others higher: Δy = ∓gain·size·min(1, elapsed/ramp).
				gain := []float64{4, 6, 20}[pos]
				ramp := math.Min(1, f*120/30) // episode is 120 min
				want := gain * 0.1 * ramp
				if pos == 0 {
					want = -want
				}
				if math.Abs(w-wo-want) > 2*res {
					t.Fatalf("relation channel %d: Δ %v, want %v", pos, w-wo, want)
				}
			}},
		{ep: Episode{Kind: Effect, Channels: []string{"u1.a.q", "u2.c.w"}, Driver: "load", Factor: 3},
			check: func(t *testing.T, pos int, w, wo, f, x float64) {
				// Terms in the driver are scaled by 1 + (F-1)·frac:
				// Δy = (F-1)·frac·gain·f(x).
				m := 2 * f
				want := []float64{m * -10 * x, m * 5 * x * x}[pos]
				if math.Abs(w-wo-want) > 2*res {
					t.Fatalf("effect channel %d: Δ %v, want %v", pos, w-wo, want)
				}
			}},
	}
	infos := base.Channels()
	for _, c := range cases {
		t.Run(string(c.ep.Kind), func(t *testing.T) {
			ep := c.ep
			ep.ID, ep.Start, ep.End = "E-"+string(ep.Kind), from, to
			with := base.Clone()
			with.Episodes = []Episode{ep}
			named := map[int]int{}
			assets := map[string]bool{}
			for pos, n := range ep.Channels {
				for i, ci := range infos {
					if ci.Name == n {
						named[i] = pos
						assets[ci.Unit+",asset="+ci.Asset+" "] = true
					}
				}
			}
			gw, err := with.NewGenerator()
			if err != nil {
				t.Fatal(err)
			}
			gwo, _ := base.NewGenerator()
			changed := map[int]bool{}
			var diffs []float64
			var bw, bwo []byte
			for gw.Step() && gwo.Step() {
				in := !gw.Time().Before(from) && gw.Time().Before(to)
				frac := float64(gw.Time().Sub(from)) / float64(to.Sub(from))
				vw, vwo := gw.Values(), gwo.Values()
				for i := range vw {
					same := vw[i] == vwo[i] || (math.IsNaN(vw[i]) && math.IsNaN(vwo[i]))
					pos, isNamed := named[i]
					switch {
					case !isNamed || !in:
						if !same {
							t.Fatalf("%s changed at %v (named %v, inside %v)", infos[i].Name, gw.Time(), isNamed, in)
						}
					default:
						if !same {
							changed[i] = true
						}
						if c.check != nil && !math.IsNaN(vwo[i]) {
							c.check(t, pos, vw[i], vwo[i], frac, gw.Drivers()[0])
						}
						if pos == 0 && !math.IsNaN(vw[i]) && !math.IsNaN(vwo[i]) {
							diffs = append(diffs, vw[i]-vwo[i])
						}
					}
				}
				// Line protocol of assets without a named channel is identical.
				bw, _ = gw.AppendLines(bw[:0])
				bwo, _ = gwo.AppendLines(bwo[:0])
				lw, lwo := strings.Split(string(bw), "\n"), strings.Split(string(bwo), "\n")
				for _, l := range lw {
					if l == "" {
						continue
					}
					if !assets[l[:strings.IndexByte(l, ' ')+1]] && !contains(lwo, l) {
						t.Fatalf("line of an untouched asset changed: %s", l)
					}
				}
			}
			for i := range named {
				if !changed[i] {
					t.Errorf("%s never changed", infos[i].Name)
				}
			}
			if c.after != nil {
				c.after(t, diffs)
			}
		})
	}
}

func contains(ss []string, s string) bool {
	for _, x := range ss {
		if x == s {
			return true
		}
	}
	return false
}

// TestStuckHoldsFirstValue: a stuck channel repeats, for the whole episode,
// the value it read at the episode's first sample.
func TestStuckHoldsFirstValue(t *testing.T) {
	s, err := LoadBytes("faults.yaml", []byte(faultBase))
	if err != nil {
		t.Fatal(err)
	}
	s.Dropout = 0
	from := s.Start.Add(time.Hour)
	s.Episodes = []Episode{{ID: "S", Kind: Stuck, Start: from, End: from.Add(time.Hour), Channels: []string{"u1.a.p"}}}
	clean := s.Clone()
	clean.Episodes = nil
	g, _ := s.NewGenerator()
	gc, _ := clean.NewGenerator()
	var held float64
	for g.Step() && gc.Step() {
		switch {
		case g.Time().Equal(from):
			held = g.Values()[0]
			if held != gc.Values()[0] {
				t.Fatalf("first stuck value %v, live value %v", held, gc.Values()[0])
			}
		case g.Time().After(from) && g.Time().Before(from.Add(time.Hour)):
			if g.Values()[0] != held {
				t.Fatalf("at %v: %v, want held %v", g.Time(), g.Values()[0], held)
			}
		}
	}
}

var _ = scalar.EqualWithinAbsOrRel

// TestTrendMovesGateQuantum checks the generator's slow changes and
// machine states against their definitions (Trend, Move, Gate, Quantum),
// value by value, with no noise so every number is derived by hand.
func TestTrendMovesGateQuantum(t *testing.T) {
	const y = `
seed: 1
start: 2026-01-05T00:00:00Z
duration: 3h
period: 10m
drivers:
  - {name: wear, mean: 0, trend: {per_day: 24, reset: 2h}}
  - {name: sp, mean: 10, moves: [{at: 1h, by: 2, over: 20m}, {at: 2h, by: -1}]}
  - {name: run, mean: 0, steps: {levels: [0, 1], hold: 1000h}}
units:
  - name: u
    assets:
      - name: a
        channels:
          - {name: w, eng_unit: x, base: 0, noise: 0, decimals: 6, terms: {wear: 1}}
          - {name: s, eng_unit: x, base: 10, noise: 0, decimals: 6, quantum: 0.5, terms: {sp: 1.1}}
          - {name: m, eng_unit: x, base: 5, noise: 0, decimals: 6, gate: run, rest: -1, terms: {sp: 1}}
`
	s, err := LoadBytes("t.yaml", []byte(y))
	if err != nil {
		t.Fatal(err)
	}
	g, _ := s.NewGenerator()
	for g.Step() {
		h := float64(g.Index()) / 6 // hours since start
		// wear: 24 per day = 1 per hour, back to 0 every 2 h.
		wear := math.Mod(h, 2)
		// sp: +2 ramped over 20 min from 1 h, then -1 from 2 h.
		sp := 0.0
		if h >= 1 {
			sp += 2 * math.Min(1, (h-1)*3)
		}
		if h >= 2 {
			sp--
		}
		v := g.Values()
		if !scalar.EqualWithinAbs(v[0], wear, 1e-6) {
			t.Errorf("%.2f h: wear reads %g, want %g", h, v[0], wear)
		}
		if want := math.Round((10+1.1*sp)/0.5) * 0.5; v[1] != want {
			t.Errorf("%.2f h: quantised channel reads %g, want %g", h, v[1], want)
		}
		want := 5 + sp
		if g.Drivers()[2] <= 0 {
			want = -1 // at rest
		}
		if !scalar.EqualWithinAbs(v[2], want, 1e-6) {
			t.Errorf("%.2f h: gated channel reads %g, want %g", h, v[2], want)
		}
	}
}

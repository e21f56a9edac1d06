package sim

import (
	"bytes"
	"crypto/sha256"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	plants "modewatch/configs/realism"
)

// loadPlants parses every plant of the realism suite.
func loadPlants(t testing.TB) map[string]*Scenario {
	t.Helper()
	out := map[string]*Scenario{}
	for _, p := range plants.Plants() {
		s, err := LoadBytes(p.File, p.YAML)
		if err != nil {
			t.Fatal(err)
		}
		out[p.Name] = s
	}
	return out
}

// TestRealismSuiteShape checks what the suite must span (issue 11, point
// 2): at least three plants that differ in period, size and unit count,
// each with at least 7 normal days, 5 test days and 8 labelled faults of
// every required kind, overlapping in another unit and in the same unit's
// other equipment, and no fault in the normal days.
func TestRealismSuiteShape(t *testing.T) {
	ps := loadPlants(t)
	if len(ps) < 3 {
		t.Fatalf("%d plants, want at least 3", len(ps))
	}
	periods, sizes, unitCounts := map[time.Duration]bool{}, map[int]bool{}, map[int]bool{}
	for name, s := range ps {
		t.Run(name, func(t *testing.T) {
			n, u := len(s.Channels()), len(s.Units)
			periods[s.Period], sizes[n], unitCounts[u] = true, true, true
			if n < 15 || n > 200 || u < 1 || u > 5 {
				t.Errorf("%d channels in %d units, want 15–200 in 1–5", n, u)
			}
			if s.Split.IsZero() || s.Split.Sub(s.Start) < 7*24*time.Hour || s.End().Sub(s.Split) < 5*24*time.Hour {
				t.Errorf("split %v of %v from %v: want ≥ 7 normal days and ≥ 5 test days", s.Split, s.Duration, s.Start)
			}
			if s.Jitter <= 0 || s.Dropout <= 0 {
				t.Errorf("jitter %v, dropout %v: want both", s.Jitter, s.Dropout)
			}
			if len(s.Episodes) < 8 {
				t.Errorf("%d faults, want at least 8", len(s.Episodes))
			}
			kinds := map[FaultKind]bool{}
			unitOf := func(ch string) string { return ch[:strings.IndexByte(ch, '.')] }
			assetOf := func(ch string) string { return ch[:strings.LastIndexByte(ch, '.')] }
			otherUnit, otherAsset := false, false
			for _, e := range s.Episodes {
				kinds[e.Kind] = true
				if e.Start.Before(s.Split) {
					t.Errorf("fault %s starts in the normal days", e.ID)
				}
				for _, o := range s.Episodes {
					if o.ID == e.ID || !o.Start.Before(e.Start) || !e.Start.Before(o.End) {
						continue // o must be open when e starts
					}
					if unitOf(o.Channels[0]) != unitOf(e.Channels[0]) {
						otherUnit = true
					} else if assetOf(o.Channels[0]) != assetOf(e.Channels[0]) {
						otherAsset = true
					}
				}
				if e.Kind == Outage {
					var all []string
					for _, c := range s.Channels() {
						if c.Unit == e.Unit {
							all = append(all, c.Name)
						}
					}
					if !slices.Equal(all, e.Channels) || e.End.Sub(e.Start) != 30*time.Minute {
						t.Errorf("outage %s: %d of the unit's %d channels for %v, want all for 30 min", e.ID, len(e.Channels), len(all), e.End.Sub(e.Start))
					}
				}
			}
			for _, k := range []FaultKind{Bias, Drift, Stuck, Noise, Spikes, Outage} {
				if !kinds[k] {
					t.Errorf("no %s fault", k)
				}
			}
			if !kinds[Relation] && !kinds[Effect] {
				t.Error("no broken relation (relation or effect)")
			}
			if !otherUnit || !otherAsset {
				t.Errorf("overlapping faults: in another unit %v, in the same unit's other equipment %v; want both", otherUnit, otherAsset)
			}
		})
	}
	if len(periods) < 3 || len(sizes) < 3 || len(unitCounts) < 3 {
		t.Errorf("plants differ in %d periods, %d sizes, %d unit counts; want 3 of each", len(periods), len(sizes), len(unitCounts))
	}
}

// chanStats accumulates one channel over the normal days.
type chanStats struct {
	n, sum, sq float64
	values     map[float64]int // distinct values, up to 64
	nonInt     bool
}

func (c *chanStats) sd() float64 {
	m := c.sum / c.n
	return math.Sqrt(math.Max(0, c.sq/c.n-m*m))
}

// TestRealismFeatures runs every plant through and checks the features the
// suite promises, against the parameters of its scenario:
//   - every bias fault is 2–3 σ of its channel, σ its standard deviation
//     over the normal days (the scale the scenario comments use);
//   - a trend without reset (seasonal) takes its driver above its whole
//     normal range in the test days, and a sawtooth (normal wear) resets
//     in the normal days;
//   - a gated machine starts and stops at least twice a day on average,
//     its gated channels read exactly their rest value at rest, and a
//     running/standby status channel reads 1 or 0 in step with it;
//   - a planned move lies in the test days;
//   - quantised channels read multiples of their quantum; at least one
//     channel is nearly constant (one value in ≥ 95 % of samples, at most
//     3 values); integer status channels read integers;
//   - a driver moves channels of at least two units;
//   - every channel of an outage's unit is missing during it, and present
//     (dropouts aside) just before.
func TestRealismFeatures(t *testing.T) {
	for name, s := range loadPlants(t) {
		t.Run(name, func(t *testing.T) {
			g, err := s.NewGenerator()
			if err != nil {
				t.Fatal(err)
			}
			chs := s.Channels()
			stats := make([]chanStats, len(chs))
			for i := range stats {
				stats[i].values = map[float64]int{}
			}
			drvMax, drvTestMax := make([]float64, len(s.Drivers)), make([]float64, len(s.Drivers))
			for i := range drvMax {
				drvMax[i], drvTestMax[i] = math.Inf(-1), math.Inf(-1)
			}
			index := map[string]int{}
			for i, c := range chs {
				index[c.Name] = i
			}
			ptrs := make([]*Channel, len(chs))
			for i, c := range chs {
				ptrs[i] = s.channel(c.Name)
			}
			chanOf := func(i int) *Channel { return ptrs[i] }
			switches := make([]int, len(s.Drivers))
			prevOn := make([]bool, len(s.Drivers))
			var outageErr []string
			for g.Step() {
				now := g.Time()
				normal := now.Before(s.Split)
				x, v := g.Drivers(), g.Values()
				for d := range s.Drivers {
					if normal {
						drvMax[d] = math.Max(drvMax[d], x[d])
					} else {
						drvTestMax[d] = math.Max(drvTestMax[d], x[d])
					}
					on := s.Drivers[d].Mean+x[d] > 0
					if g.Index() > 0 && on != prevOn[d] {
						switches[d]++
					}
					prevOn[d] = on
				}
				for i, y := range v {
					c := chanOf(i)
					if c.Gate.On && !math.IsNaN(y) && s.Drivers[c.Gate.Driver].Mean+x[c.Gate.Driver] <= 0 && y != c.Gate.Rest && !faulty(s, chs[i].Name, now) {
						t.Fatalf("%s reads %g at rest at %s, want exactly %g", chs[i].Name, y, now, c.Gate.Rest)
					}
					if c.Quantum > 0 && !math.IsNaN(y) {
						if q := y / c.Quantum; math.Abs(q-math.Round(q)) > 1e-6 && !faulty(s, chs[i].Name, now) {
							t.Fatalf("%s reads %g, not a multiple of %g", chs[i].Name, y, c.Quantum)
						}
					}
					if !normal || math.IsNaN(y) {
						continue
					}
					st := &stats[i]
					st.n++
					st.sum += y
					st.sq += y * y
					if len(st.values) < 64 {
						st.values[y]++
					}
					st.nonInt = st.nonInt || y != math.Round(y)
				}
				for _, e := range s.Episodes {
					if e.Kind != Outage || now.Before(e.Start) || !now.Before(e.End) {
						continue
					}
					for _, c := range e.Channels {
						if !math.IsNaN(v[index[c]]) {
							outageErr = append(outageErr, c+" at "+now.Format(time.RFC3339))
						}
					}
				}
			}
			if len(outageErr) > 0 {
				t.Errorf("values during an outage: %s", strings.Join(outageErr[:min(3, len(outageErr))], ", "))
			}
			for _, e := range s.Episodes {
				if e.Kind != Bias {
					continue
				}
				sd := stats[index[e.Channels[0]]].sd()
				if r := math.Abs(e.Size) / sd; r < 2 || r > 3 {
					t.Errorf("bias %s: %g on σ %.4g is %.2f σ, want 2–3 σ", e.ID, e.Size, sd, r)
				}
			}
			normalDays := s.Split.Sub(s.Start).Hours() / 24
			var seasonal, sawtooth, moved, gated, crossUnit bool
			for d, drv := range s.Drivers {
				if drv.Trend.PerDay != 0 && drv.Trend.Reset == 0 && drvTestMax[d] > drvMax[d] {
					seasonal = true
				}
				if drv.Trend.PerDay != 0 && drv.Trend.Reset > 0 && drv.Trend.Reset < s.Split.Sub(s.Start) {
					sawtooth = true
				}
				for _, m := range drv.Moves {
					moved = moved || !m.At.Before(s.Split)
				}
				units := map[string]bool{}
				for i, c := range chs {
					for _, tm := range chanOf(i).Terms {
						if tm.A == d || (tm.Kind == Product && tm.B == d) {
							units[c.Unit] = true
						}
					}
				}
				crossUnit = crossUnit || len(units) >= 2
			}
			for i, c := range chs {
				ch := chanOf(i)
				if !ch.Gate.On {
					continue
				}
				gated = true
				if perDay := float64(switches[ch.Gate.Driver]) / 2 / (s.Duration.Hours() / 24); perDay < 2 {
					t.Errorf("%s: its machine starts %.1f times a day, want at least 2", c.Name, perDay)
				}
				status := false
				for j := range chs {
					cj := chanOf(j)
					if cj.Decimals == 0 && cj.Noise == 0 && len(cj.Terms) == 1 && cj.Terms[0].A == ch.Gate.Driver {
						st := stats[j]
						status = len(st.values) == 2 && st.values[0] > 0 && st.values[1] > 0
					}
				}
				if !status {
					t.Errorf("%s: no running/standby status channel reading 0 and 1", c.Name)
				}
			}
			nearlyConstant, integerStatus := false, false
			for i := range chs {
				st := stats[i]
				top := 0
				for _, k := range st.values {
					top = max(top, k)
				}
				if len(st.values) <= 3 && len(st.values) > 1 && float64(top) >= 0.95*st.n {
					nearlyConstant = true
				}
				if chanOf(i).Decimals == 0 && !st.nonInt && len(st.values) <= 4 {
					integerStatus = true
				}
			}
			for what, ok := range map[string]bool{
				"a seasonal trend leaving the normal range": seasonal, "a sawtooth of normal wear": sawtooth,
				"a planned move in the test days": moved, "a machine that starts and stops": gated,
				"a driver across units": crossUnit, "a nearly constant channel": nearlyConstant, "an integer status channel": integerStatus,
			} {
				if !ok {
					t.Errorf("no %s", what)
				}
			}
			if normalDays < 7 {
				t.Errorf("%.1f normal days", normalDays)
			}
		})
	}
}

// faulty reports whether channel ch is under a labelled fault at t.
func faulty(s *Scenario, ch string, t time.Time) bool {
	for _, e := range s.Episodes {
		if !t.Before(e.Start) && t.Before(e.End) && slices.Contains(e.Channels, ch) {
			return true
		}
	}
	return false
}

// TestRealismDeterministic: each plant written twice with its seed gives
// the same bytes (normal.lp, test.lp, truth.json over a shortened range),
// and another seed gives other readings.
func TestRealismDeterministic(t *testing.T) {
	for name, s := range loadPlants(t) {
		t.Run(name, func(t *testing.T) {
			from, to := s.Split.Add(-6*time.Hour), s.Split.Add(6*time.Hour)
			sum := func(s *Scenario) [3][32]byte {
				dir := t.TempDir()
				f, err := s.WriteSplit(dir, false, from, to)
				if err != nil {
					t.Fatal(err)
				}
				var out [3][32]byte
				for i, p := range []string{f.Normal, f.Test, f.Truth} {
					b, err := os.ReadFile(p)
					if err != nil {
						t.Fatal(err)
					}
					out[i] = sha256.Sum256(b)
				}
				return out
			}
			a, b := sum(s), sum(s)
			if a != b {
				t.Error("the same seed gave different files")
			}
			other := s.Clone()
			other.Seed++
			if c := sum(other); c[0] == a[0] || c[1] == a[1] {
				t.Error("another seed gave the same readings")
			}
		})
	}
}

// TestWriteSplit: normal.lp holds the samples before the split, test.lp
// those from it on, and truth.json the episodes of the written range, cut
// at its end.
func TestWriteSplit(t *testing.T) {
	s := loadPlants(t)["compressor-station"]
	first := s.Episodes[0]
	from, to := s.Split.Add(-time.Hour), first.Start.Add(time.Hour) // cuts the first fault
	dir := t.TempDir()
	f, err := s.WriteSplit(dir, false, from, to)
	if err != nil {
		t.Fatal(err)
	}
	if f.Normal != filepath.Join(dir, "normal.lp") || f.Test != filepath.Join(dir, "test.lp") || f.Readings != "" {
		t.Fatalf("files %+v", f)
	}
	stamps := func(p string) (lo, hi time.Time) {
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		for i, line := range bytes.Split(bytes.TrimSpace(b), []byte("\n")) {
			fs := bytes.Fields(line)
			ns, err := strconv.ParseInt(string(fs[len(fs)-1]), 10, 64)
			if err != nil {
				t.Fatalf("%s:%d: %v", p, i+1, err)
			}
			tt := time.Unix(0, ns).UTC()
			if lo.IsZero() || tt.Before(lo) {
				lo = tt
			}
			if tt.After(hi) {
				hi = tt
			}
		}
		return lo, hi
	}
	nlo, nhi := stamps(f.Normal)
	tlo, thi := stamps(f.Test)
	j := s.Jitter
	if nlo.Before(from.Add(-j)) || !nhi.Before(s.Split.Add(j)) || tlo.Before(s.Split.Add(-j)) || !thi.Before(to.Add(j)) {
		t.Errorf("normal %s–%s, test %s–%s; want [%s, %s) and [%s, %s) ± jitter", nlo, nhi, tlo, thi, from, s.Split, s.Split, to)
	}
	tf, _ := os.Open(f.Truth)
	defer tf.Close()
	tr, err := ReadTruth(tf)
	if err != nil {
		t.Fatal(err)
	}
	if len(tr.Episodes) != 1 || tr.Episodes[0].ID != first.ID || !tr.Episodes[0].End.Equal(to) {
		t.Errorf("truth %+v, want only %s ending at %s", tr.Episodes, first.ID, to)
	}
	if _, err := s.WriteSplit(dir, false, s.Split, to); err == nil {
		t.Error("a range that does not contain the split was accepted")
	}
}

// TestRealismFaultsDetectable runs every plant with and without its faults:
// each fault moves its channels by at least 3 noise σ at some sample (a
// stuck sensor: at least 1 σ, it only stops moving), and the log shows how
// much of each fault stays inside the channel's normal-day range.
func TestRealismFaultsDetectable(t *testing.T) {
	for name, s := range loadPlants(t) {
		t.Run(name, func(t *testing.T) {
			for _, f := range faultEffects(t, s, s.Split) {
				need := 3.0
				if f.kind == Stuck {
					need = 1
				}
				if f.maxDev < need*f.noise {
					t.Errorf("%s on %s: largest change %.3g < %gσ = %.3g", f.id, f.channel, f.maxDev, need, need*f.noise)
				}
				t.Logf("%s %s: max change %.3g (%.1f noise σ), %.0f%% inside the normal days' range", f.id, f.channel, f.maxDev, f.maxDev/f.noise, 100*f.inside)
			}
		})
	}
}

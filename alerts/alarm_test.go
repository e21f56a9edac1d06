package alerts

import (
	"math"
	"math/bits"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/stat/distuv"
)

var t0 = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

func sec(s float64) time.Time { return t0.Add(time.Duration(s * float64(time.Second))) }

type step struct {
	at    float64 // seconds after t0
	ratio float64 // value/limit (limit 10)
	want  State
}

// TestAlarmTransitions drives the state machine frame by frame and asserts
// the state after every frame. Semantics of on-delay, off-delay and
// deadband: OPC UA Part 9, Annex B.1.5; n-of-m on-delay: our design.
func TestAlarmTransitions(t *testing.T) {
	N, Cf, A, Cl := Normal, Confirming, Active, Clearing
	cases := []struct {
		name  string
		rule  AlarmRule
		steps []step
	}{
		{
			// L6: over in frames 1, 3, 4 with n = 3, m = 5: confirming until
			// frame 4, active at frame 4.
			name: "L6 on-delay 3 of 5",
			rule: AlarmRule{N: 3, M: 5, OffDelay: 10 * time.Second, Deadband: 0.05},
			steps: []step{
				{1, 1.2, Cf}, {2, 0.5, Cf}, {3, 1.3, Cf}, {4, 1.1, A}, {5, 1.5, A},
			},
		},
		{
			// L6: a single-frame spike never activates; it leaves the
			// window after m frames and the alarm is normal again.
			name: "L6 single spike",
			rule: AlarmRule{N: 3, M: 5, OffDelay: 10 * time.Second, Deadband: 0.05},
			steps: []step{
				{0, 0.5, N}, {1, 9, Cf}, {2, 0.5, Cf}, {3, 0.5, Cf}, {4, 0.5, Cf}, {5, 0.5, Cf}, {6, 0.5, N}, {7, 0.5, N},
			},
		},
		{
			// exactly at the limit is not over (r > 1 is over).
			name:  "at limit is not over",
			rule:  AlarmRule{N: 1, M: 1},
			steps: []step{{0, 1, N}, {1, 1.0000001, A}},
		},
		{
			// L7: limit U, deadband d = 0.1; the statistic oscillates between
			// U(1 − d/2) and U(1 + d/2): one activation, no return to normal.
			name: "L7 deadband",
			rule: AlarmRule{N: 1, M: 1, OffDelay: 0, Deadband: 0.1},
			steps: []step{
				{0, 1.05, A}, {1, 0.95, A}, {2, 1.05, A}, {3, 0.95, A}, {4, 1.05, A}, {5, 0.95, A},
				{6, 0.91, A}, {7, 0.899, N}, // below U(1 − d): back at once (off-delay 0)
			},
		},
		{
			// L8: back under the deadband for less than the off-delay (9 s of
			// 10 s): stays in alarm; then for the full off-delay: returns.
			name: "L8 off-delay",
			rule: AlarmRule{N: 1, M: 1, OffDelay: 10 * time.Second, Deadband: 0.05},
			steps: []step{
				{0, 2, A},
				{1, 0.5, Cl}, {5, 0.5, Cl}, {10, 0.5, Cl}, // 9 s below
				{11, 0.97, A},                              // inside the deadband: not clear, back to active
				{12, 0.5, Cl}, {21, 0.5, Cl}, {22, 0.5, N}, // 10 s below: normal
				{23, 0.5, N},
			},
		},
		{
			name: "on-hold on top of n of m",
			rule: AlarmRule{N: 2, M: 3, OnHold: 5 * time.Second, OffDelay: time.Second},
			steps: []step{
				{0, 2, Cf}, {1, 2, Cf}, {4, 2, Cf}, {5, 2, A}, {6, 0.1, Cl}, {7, 0.1, N},
			},
		},
		{
			// a spike that dies out before the on-hold ends never activates.
			name:  "on-hold spike",
			rule:  AlarmRule{N: 1, M: 1, OnHold: 5 * time.Second},
			steps: []step{{0, 2, Cf}, {1, 2, Cf}, {2, 0.5, N}},
		},
		{
			name: "full cycle m = 64",
			rule: AlarmRule{N: 64, M: 64, OffDelay: 0},
			steps: func() []step {
				var s []step
				for i := 0; i < 63; i++ {
					s = append(s, step{float64(i), 2, Cf})
				}
				return append(s, step{63, 2, A}, step{64, 0.1, N})
			}(),
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			a := NewAlarm(c.rule)
			prev := Normal
			activations := 0
			for i, s := range c.steps {
				from, to, ok := a.Step(sec(s.at), s.ratio*10, 10)
				if !ok {
					t.Fatalf("frame %d: not applied", i)
				}
				if from != prev || to != s.want {
					t.Fatalf("frame %d at %vs ratio %v: %v → %v, want %v → %v", i, s.at, s.ratio, from, to, prev, s.want)
				}
				if to != from && !a.Since().Equal(sec(s.at)) {
					t.Errorf("frame %d: Since = %v, want the frame time %v", i, a.Since(), sec(s.at))
				}
				if to == Active && from != Active && from != Clearing {
					activations++
				}
				prev = to
			}
			if c.name == "L7 deadband" && activations != 1 {
				t.Errorf("L7: %d activations, want 1", activations)
			}
		})
	}
}

func TestAlarmIgnoresBadFrames(t *testing.T) {
	a := NewAlarm(AlarmRule{N: 1, M: 1})
	for _, vl := range [][2]float64{{math.NaN(), 1}, {math.Inf(1), 1}, {5, 0}, {5, -1}, {5, math.NaN()}, {5, math.Inf(1)}} {
		if _, to, ok := a.Step(t0, vl[0], vl[1]); ok || to != Normal {
			t.Errorf("value %v limit %v: ok %v state %v, want ignored", vl[0], vl[1], ok, to)
		}
	}
}

func TestNewAlarmPanicsOnBadRule(t *testing.T) {
	for _, r := range []AlarmRule{{N: 0, M: 1}, {N: 3, M: 2}, {N: 1, M: 65}, {N: 1, M: 1, Deadband: 1}} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("rule %+v: no panic", r)
				}
			}()
			NewAlarm(r)
		}()
	}
}

// TestFalseAlarmArithmetic is L9: one-sample rule at α = 0.01 and 1 Hz gives
// 36 exceedances per hour; the (3,5) window probability is 9.8506×10⁻⁶
// (binomial tail, computed), also checked against gonum's binomial
// survival function and other rows below.
func TestFalseAlarmArithmetic(t *testing.T) {
	if got := WindowProbability(0.01, 1, 1) * 3600; !scalar.EqualWithinAbsOrRel(got, 36, 0, 1e-12) {
		t.Errorf("one-sample rule, 1 h at 1 Hz: %v, want 36", got)
	}
	cases := []struct {
		alpha float64
		n, m  int
		want  float64 // binomial tail Σ_{k≥n} C(m,k)αᵏ(1−α)^{m−k}, computed
	}{
		{0.01, 2, 3, 2.98e-4},
		{0.01, 3, 5, 9.8506e-6},
		{0.01, 5, 10, 2.4168e-8},
		{0.05, 3, 5, 1.158125e-3},
	}
	for _, c := range cases {
		got := WindowProbability(c.alpha, c.n, c.m)
		tol := 1e-9
		if c.n == 5 {
			tol = 5e-5 // the table prints 5 significant digits
		}
		if !scalar.EqualWithinAbsOrRel(got, c.want, 0, tol) {
			t.Errorf("α=%v (%d,%d): %.10g, want %.10g", c.alpha, c.n, c.m, got, c.want)
		}
		b := distuv.Binomial{N: float64(c.m), P: c.alpha}
		// gonum evaluates it through the regularized incomplete beta function.
		if ref := b.Survival(float64(c.n) - 0.5); !scalar.EqualWithinAbsOrRel(got, ref, 0, 1e-8) {
			t.Errorf("α=%v (%d,%d): %.10g, gonum Binomial survival %.10g", c.alpha, c.n, c.m, got, ref)
		}
	}
	// The window fraction of seeded independent draws, through the same
	// bit window the Alarm uses, at α = 0.05, (3,5): non-overlapping
	// windows are independent, so the count is binomial.
	rng := rand.New(rand.NewPCG(1, 2))
	const windows = 400000
	hits := 0
	for i := 0; i < windows; i++ {
		var w uint64
		for k := 0; k < 5; k++ {
			w <<= 1
			if rng.Float64() < 0.05 {
				w |= 1
			}
		}
		if bits.OnesCount64(w) >= 3 {
			hits++
		}
	}
	p := WindowProbability(0.05, 3, 5)
	se := math.Sqrt(windows * p * (1 - p))
	if d := math.Abs(float64(hits) - windows*p); d > 3*se {
		t.Errorf("seeded windows: %d hits, expected %.1f ± 3·%.1f", hits, windows*p, se)
	}
}

// TestRunLength is L10: with independent draws at α = 0.01 the mean wait
// for 2 consecutive exceedances is (1 − α²)/((1 − α)α²) = 10,100 frames
// (the mean waiting time for a run of 2 successes; Feller, An Introduction
// to Probability Theory, vol. I, ch. XIII); the Alarm with N = M = 2 is
// that rule. Fewer sequences than 10⁶ keep the test fast; the tolerance is
// ±3 standard errors of the seeded sample.
func TestRunLength(t *testing.T) {
	if got := ConsecutiveRunLength(0.01, 2); !scalar.EqualWithinAbsOrRel(got, 10100, 0, 1e-12) {
		t.Errorf("E(α=0.01, n=2) = %v, want 10100", got)
	}
	if got := ConsecutiveRunLength(0.01, 3); !scalar.EqualWithinAbsOrRel(got, 1010100, 0, 1e-12) {
		t.Errorf("E(α=0.01, n=3) = %v, want 1010100", got)
	}
	if got := ConsecutiveRunLength(0.05, 3); !scalar.EqualWithinAbsOrRel(got, 8420, 0, 1e-12) {
		t.Errorf("E(α=0.05, n=3) = %v, want 8420", got)
	}
	sequences := 3000
	if testing.Short() {
		sequences = 500
	}
	rng := rand.New(rand.NewPCG(7, 11))
	var sum, sum2 float64
	for s := 0; s < sequences; s++ {
		a := NewAlarm(AlarmRule{N: 2, M: 2})
		for i := 1; ; i++ {
			v := 0.5
			if rng.Float64() < 0.01 {
				v = 2
			}
			if _, to, _ := a.Step(sec(float64(i)), v, 1); to == Active {
				sum += float64(i)
				sum2 += float64(i) * float64(i)
				break
			}
		}
	}
	n := float64(sequences)
	mean := sum / n
	se := math.Sqrt((sum2/n - mean*mean) / n)
	if math.Abs(mean-10100) > 3*se {
		t.Errorf("mean wait %.1f frames, want 10100 ± 3·%.1f", mean, se)
	}
}

func BenchmarkAlarmStep(b *testing.B) {
	a := NewAlarm(AlarmRule{N: 3, M: 5, OffDelay: time.Minute, Deadband: 0.05})
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		a.Step(sec(float64(i)), float64(i%7), 5)
	}
}

package sim

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/stat"
)

// realism is a test plant whose moments can be derived by hand. Four whole
// days at 60 s, so the daily cycles average out exactly; short correlation
// times, so sampling errors are small. Load and ambient peak 6 h apart, so
// their daily cycles are orthogonal over a day (cos(π/2) = 0) and channels
// on different drivers are uncorrelated.
const realism = `
seed: 4242
start: 2026-04-06T00:00:00Z
duration: 4d
period: 60s
drivers:
  - {name: load, mean: 0.5, daily: {amplitude: 0.2, peak: 14h}, walk: {sigma: 0.05, tau: 1m}}
  - {name: ambient, mean: 10, daily: {amplitude: 4, peak: 20h}, walk: {sigma: 1, tau: 1m}}
  - {name: speed, mean: 1000, steps: {levels: [-50, 0, 50, 150], hold: 2m}}
  - {name: w, mean: 0, walk: {sigma: 2, tau: 2m}}
units:
  - name: plant
    assets:
      - name: a
        channels:
          - {name: x1, eng_unit: m, base: 10, noise: 0.5, decimals: 6, terms: {load: 20}}
          - {name: x2, eng_unit: m, base: 5, noise: 0.3, decimals: 6, terms: {load: -10}}
      - name: b
        channels:
          - {name: y1, eng_unit: m, base: 30, noise: 0.4, decimals: 6, terms: {ambient: 0.8}}
          - {name: y2, eng_unit: m, base: 12, noise: 0.2, decimals: 6, wander: {sigma: 0.3, tau: 1m}, terms: {ambient: 0.5}}
      - name: c
        channels:
          - {name: z1, eng_unit: m, base: 20, noise: 0.5, decimals: 6, terms: {speed: 0.02}}
          - {name: z2, eng_unit: m, base: 4, noise: 0.3, decimals: 6, terms: {speed: 0.01, load: 5}}
      - name: d
        channels:
          - {name: n, eng_unit: m, base: 1, noise: 0.2, decimals: 6}
          - {name: r, eng_unit: m, base: 0, noise: 0.1, decimals: 6, terms: {w: 1}}
          - {name: q, eng_unit: m, base: 3, noise: 0.1, decimals: 6, terms: {load^2: 10}}
`

// moments holds what the scenario parameters imply for one linear channel.
type moments struct {
	mean   float64
	g      []float64 // gain per driver (linear terms)
	own    float64   // variance of the channel's own wander + noise
	rhoMax float64   // largest lag-1 autocorrelation among its random parts
}

// Driver facts used below (elementary, derived by hand; from memory where noted):
//   - the time average of A·cos(ωτ-ωp) over whole days is 0, of its square A²/2,
//     and of the product of two such cycles A₁A₂/2·cos(ω(p₁-p₂));
//   - the Ornstein-Uhlenbeck walk has mean 0, variance σ² and lag-1
//     autocorrelation φ = exp(-Δt/τ) (Uhlenbeck & Ornstein 1930);
//   - the step setpoint is uniform over its levels in the long run, with lag-1
//     autocorrelation 1-p, p = Δt/hold (a switch redraws uniformly).
func driverMoments(d Driver, dt time.Duration) (mean, varRand, rho float64) {
	if d.Walk.Sigma > 0 {
		varRand += d.Walk.Sigma * d.Walk.Sigma
		rho = math.Exp(-dt.Seconds() / d.Walk.Tau.Seconds())
	}
	if n := len(d.Steps.Levels); n > 0 {
		mean = stat.Mean(d.Steps.Levels, nil)
		varRand += stat.PopVariance(d.Steps.Levels, nil)
		rho = math.Max(rho, 1-math.Min(1, dt.Seconds()/d.Steps.Hold.Seconds()))
	}
	return mean, varRand, rho
}

const omega = 2 * math.Pi / float64(24*time.Hour)

// cycleCov is the time-average covariance of the daily cycles of drivers a and b.
func cycleCov(a, b Driver) float64 {
	return a.Daily.Amplitude * b.Daily.Amplitude / 2 * math.Cos(omega*float64(a.Daily.Peak-b.Daily.Peak))
}

func TestRealism(t *testing.T) {
	s, err := LoadBytes("realism.yaml", []byte(realism))
	if err != nil {
		t.Fatal(err)
	}
	infos := s.Channels()
	nd := len(s.Drivers)
	dm, dv, drho := make([]float64, nd), make([]float64, nd), make([]float64, nd)
	for i, d := range s.Drivers {
		dm[i], dv[i], drho[i] = driverMoments(d, s.Period)
	}

	// Expected moments of the linear channels, straight from the parameters.
	lin := map[string]*moments{}
	var q *Channel
	for ui := range s.Units {
		for ai := range s.Units[ui].Assets {
			a := &s.Units[ui].Assets[ai]
			for ci := range a.Channels {
				c := &a.Channels[ci]
				name := s.Units[ui].Name + "." + a.Name + "." + c.Field
				m := &moments{mean: c.Base, g: make([]float64, nd), own: c.Noise*c.Noise + c.Wander.Sigma*c.Wander.Sigma}
				if c.Wander.Sigma > 0 {
					m.rhoMax = math.Exp(-s.Period.Seconds() / c.Wander.Tau.Seconds())
				}
				nonlinear := false
				for _, tm := range c.Terms {
					if tm.Kind != Linear {
						nonlinear = true
						continue
					}
					m.g[tm.A] += tm.Gain
					m.mean += tm.Gain * dm[tm.A]
					m.rhoMax = math.Max(m.rhoMax, drho[tm.A])
				}
				if nonlinear {
					q = c
					continue
				}
				lin[name] = m
			}
		}
	}
	cov := func(a, b *moments, same bool) float64 {
		v := 0.0
		for i := 0; i < nd; i++ {
			v += a.g[i] * b.g[i] * dv[i]
			for j := 0; j < nd; j++ {
				v += a.g[i] * b.g[j] * cycleCov(s.Drivers[i], s.Drivers[j])
			}
		}
		if same {
			v += a.own
		}
		return v
	}

	// Generate once, keep every channel's series and the time of day.
	g, err := s.NewGenerator()
	if err != nil {
		t.Fatal(err)
	}
	series := make([][]float64, len(infos))
	var cosT, sinT []float64
	for g.Step() {
		for i, v := range g.Values() {
			series[i] = append(series[i], v)
		}
		tod := float64(g.Time().Sub(g.Time().Truncate(24 * time.Hour)))
		cosT, sinT = append(cosT, math.Cos(omega*tod)), append(sinT, math.Sin(omega*tod))
	}
	n := float64(len(cosT))
	col := map[string][]float64{}
	for i, c := range infos {
		col[c.Name] = series[i]
	}

	// Effective sample size of an AR(1)-like series with lag-1
	// autocorrelation ρ: N(1-ρ)/(1+ρ) (Bartlett 1946; common practice,
	// from memory). Tolerances are 4 standard errors.
	neff := func(rho float64) float64 { return n * (1 - rho) / (1 + rho) }

	for name, m := range lin {
		x := col[name]
		v := cov(m, m, true)
		mean, sd := stat.MeanStdDev(x, nil)
		ne := neff(m.rhoMax)
		if tol := 4 * math.Sqrt(v/ne); !scalar.EqualWithinAbs(mean, m.mean, tol) {
			t.Errorf("%s: mean %.4f, want %.4f ± %.4f", name, mean, m.mean, tol)
		}
		// SE of a sample σ ≈ σ/√(2N) (normal theory, common practice).
		if tol := 4 * math.Sqrt(v) / math.Sqrt(2*ne); !scalar.EqualWithinAbs(sd, math.Sqrt(v), tol) {
			t.Errorf("%s: σ %.4f, want %.4f ± %.4f", name, sd, math.Sqrt(v), tol)
		}
		// Daily cycle: a Fourier fit over whole days, a = 2/N Σ y cos ωτ,
		// b = 2/N Σ y sin ωτ (exact least squares for equally spaced whole
		// days); A·cos(ωτ-ωp) = A cos ωp·cos ωτ + A sin ωp·sin ωτ.
		var a, b, wa, wb float64
		for k := range x {
			a += 2 / n * x[k] * cosT[k]
			b += 2 / n * x[k] * sinT[k]
		}
		for i, d := range s.Drivers {
			wa += m.g[i] * d.Daily.Amplitude * math.Cos(omega*float64(d.Daily.Peak))
			wb += m.g[i] * d.Daily.Amplitude * math.Sin(omega*float64(d.Daily.Peak))
		}
		randVar := v - cycleVar(s, m.g) // the cycle itself is fitted exactly
		tol := 4 * math.Sqrt(2*randVar/ne)
		if !scalar.EqualWithinAbs(math.Hypot(a, b), math.Hypot(wa, wb), tol) || !scalar.EqualWithinAbs(a, wa, tol) || !scalar.EqualWithinAbs(b, wb, tol) {
			t.Errorf("%s: daily cycle (%.4f, %.4f) amplitude %.4f, want (%.4f, %.4f) amplitude %.4f ± %.4f",
				name, a, b, math.Hypot(a, b), wa, wb, math.Hypot(wa, wb), tol)
		}
	}

	// The Ornstein-Uhlenbeck walk through channel r: lag-1 autocorrelation
	// φσ²/(σ²+σ_n²); the SE of a lag-1 autocorrelation estimate of an AR(1)
	// series is √((1-φ²)/N) (Bartlett 1946, from memory).
	{
		x := col["plant.d.r"]
		phi := math.Exp(-1.0 / 2)
		want := phi * 4 / (4 + 0.01)
		got := stat.Correlation(x[:len(x)-1], x[1:], nil)
		if tol := 4 * math.Sqrt((1-phi*phi)/n); !scalar.EqualWithinAbs(got, want, tol) {
			t.Errorf("walk lag-1 autocorrelation %.4f, want %.4f ± %.4f", got, want, tol)
		}
	}

	// The square term: y = base + g·x², x = D + W, D = A cos(·), W ~ N(0, σ²):
	// E[x²] = A²/2 + σ²; E[x⁴] = 3A⁴/8 + 3A²σ² + 3σ⁴ (E cos⁴ = 3/8;
	// Gaussian fourth moment 3σ⁴, Isserlis 1918). x² has no once-a-day
	// component (cos² has period 12 h; odd moments of W vanish).
	{
		x := col["plant.d.q"]
		A, sg, gain := 0.2, 0.05, q.Terms[0].Gain
		m2 := A*A/2 + sg*sg
		m4 := 3*A*A*A*A/8 + 3*A*A*sg*sg + 3*sg*sg*sg*sg
		wantMean, wantSD := q.Base+gain*m2, math.Sqrt(gain*gain*(m4-m2*m2)+q.Noise*q.Noise)
		mean, sd := stat.MeanStdDev(x, nil)
		ne := neff(math.Exp(-1))
		randSD := math.Sqrt(gain*gain*(4*A*A/2*sg*sg+2*sg*sg*sg*sg) + q.Noise*q.Noise)
		if tol := 4 * randSD / math.Sqrt(ne); !scalar.EqualWithinAbs(mean, wantMean, tol) {
			t.Errorf("square: mean %.5f, want %.5f ± %.5f", mean, wantMean, tol)
		}
		if tol := 4 * wantSD / math.Sqrt(2*ne); !scalar.EqualWithinAbs(sd, wantSD, tol) {
			t.Errorf("square: σ %.5f, want %.5f ± %.5f", sd, wantSD, tol)
		}
		var a, b float64
		for k := range x {
			a += 2 / n * x[k] * cosT[k]
			b += 2 / n * x[k] * sinT[k]
		}
		if tol := 4 * math.Sqrt(2/ne) * randSD; math.Hypot(a, b) > tol {
			t.Errorf("square: once-a-day amplitude %.5f, want 0 ± %.5f", math.Hypot(a, b), tol)
		}
	}

	// Sparse structure: every pair's sample correlation against
	// ρ = cov/(σσ) from the parameters; SE ≈ (1-ρ²)/√N_eff (Fisher 1915,
	// normal theory; from memory). Pairs not sharing a driver have ρ = 0.
	names := []string{"plant.a.x1", "plant.a.x2", "plant.b.y1", "plant.b.y2", "plant.c.z1", "plant.c.z2", "plant.d.n", "plant.d.r"}
	nonzero := 0
	for i, ni := range names {
		for _, nj := range names[i+1:] {
			mi, mj := lin[ni], lin[nj]
			rho := cov(mi, mj, false) / math.Sqrt(cov(mi, mi, true)*cov(mj, mj, true))
			r := stat.Correlation(col[ni], col[nj], nil)
			tol := 4 * (1 - rho*rho) / math.Sqrt(neff(math.Max(mi.rhoMax, mj.rhoMax)))
			if !scalar.EqualWithinAbs(r, rho, tol) {
				t.Errorf("corr(%s, %s) = %.3f, want %.3f ± %.3f", ni, nj, r, rho, tol)
			}
			if math.Abs(rho) > 0.2 {
				nonzero++
			}
		}
	}
	// x1–x2, y1–y2, z1–z2, and z2 with x1 and x2 (shared load): 5 of 28 pairs.
	if nonzero != 5 {
		t.Errorf("%d strongly correlated pairs in the parameters, want 5 (test plant changed?)", nonzero)
	}
}

// cycleVar is the variance the daily cycles contribute to a linear channel
// with gains g.
func cycleVar(s *Scenario, g []float64) float64 {
	v := 0.0
	for i := range g {
		for j := range g {
			v += g[i] * g[j] * cycleCov(s.Drivers[i], s.Drivers[j])
		}
	}
	return v
}

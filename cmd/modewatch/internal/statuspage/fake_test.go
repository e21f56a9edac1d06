package statuspage

import (
	"fmt"
	"math"
	"sync"
	"time"

	"modewatch/alerts"
	"modewatch/cmd/modewatch/internal/pipeline"
)

// FakePlant is an invented plant for the page's tests and benchmarks:
// units × perUnit channels, every unit with modes of five channels, a
// latest score and a day of history; every tenth unit has an open
// incident with ten contributors, and 200 recent records are closed.
type FakePlant struct {
	mu    sync.Mutex
	views []pipeline.UnitView
	open  []alerts.Record
	recs  []alerts.Record
	Hist  *History
	Now   time.Time
}

func (f *FakePlant) Views() []pipeline.UnitView {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]pipeline.UnitView(nil), f.views...)
}
func (f *FakePlant) Open() []alerts.Record {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]alerts.Record(nil), f.open...)
}
func (f *FakePlant) Records() []alerts.Record {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]alerts.Record(nil), f.recs...)
}

// Bump changes every unit's frame count, so that each read differs.
func (f *FakePlant) Bump() {
	f.mu.Lock()
	for i := range f.views {
		f.views[i].Frames++
	}
	f.mu.Unlock()
}

func fp(x float64) *float64 { return &x }

// NewFakePlant builds the invented plant (deterministic).
func NewFakePlant(units, perUnit int) *FakePlant {
	now := time.Date(2026, 3, 3, 12, 0, 0, 0, time.UTC)
	f := &FakePlant{Hist: NewHistory(0, 0, 0), Now: now}
	for u := 0; u < units; u++ {
		name := fmt.Sprintf("unit%02d", u)
		v := pipeline.UnitView{Name: name, ModelState: "adapting", Frames: 4320}
		for c := 0; c < perUnit; c++ {
			v.Channels = append(v.Channels, fmt.Sprintf("%s.asset%d.ch%03d", name, c/10, c))
		}
		for m := 0; m+5 <= perUnit && m/5 < 20; m += 5 {
			mv := pipeline.ModeView{ID: m / 5, VarianceShare: 0.3 / float64(1+m/5)}
			for k := 0; k < 5; k++ {
				mv.Channels = append(mv.Channels, v.Channels[m+k])
				mv.Loadings = append(mv.Loadings, math.Sin(float64(m+k+1))/2)
			}
			v.Modes = append(v.Modes, mv)
		}
		level := 0.3 + 0.5*float64(u%7)/7
		if u%10 == 3 {
			level = 2.5
		}
		sv := &pipeline.ScoreView{Time: now, Ready: true, T2: fp(12 * level), T2Limit: fp(12), SPE: fp(0.4 * level), SPELimit: fp(0.4),
			Phi: fp(3 * level), PhiLimit: fp(3), Missing: []string{}, Excluded: []string{}, Warming: []string{}}
		if u%10 == 5 {
			sv.Missing = v.Channels[:3]
		}
		for k := 0; k < 10 && k < perUnit; k++ {
			sv.Contributors = append(sv.Contributors, pipeline.ContributorView{Channel: v.Channels[k], Share: 0.5 / float64(k+1), RBC: 9, RBCLimit: 6.6})
		}
		v.Latest = sv
		v.Limits = &pipeline.LimitsView{Alpha: 0.01, T2: fp(12), SPE: fp(0.4), Phi: fp(3)}
		f.views = append(f.views, v)
		for k := 0; k < 1440*3; k++ { // a day at 20 s
			t := now.Add(-time.Duration(1440*3-k) * 20 * time.Second)
			w := level * (1 + 0.3*math.Sin(float64(k)/40))
			f.Hist.Add(name, t, Stats{T2: 12 * w, T2Limit: 12, SPE: 0.4 * w, SPELimit: 0.4, Phi: 3 * w, PhiLimit: 3})
		}
		if u%10 == 3 {
			r := alerts.Record{ID: name + "-1", Revision: 1, Kind: alerts.KindIncident, Unit: name, Group: alerts.GroupModel,
				Start: now.Add(-time.Hour), Updated: now, State: "active", Severity: "high", Caution: alerts.Caution,
				Peak: alerts.Peak{Statistic: "t2", Value: 30, Limit: 12, Ratio: 2.5, Time: now.Add(-30 * time.Minute)}}
			for k := 0; k < 10; k++ {
				r.Contributors = append(r.Contributors, alerts.RecordContributor{Rank: k + 1, Channel: v.Channels[k], Share: 0.5 / float64(k+1), RBC: 9, RBCLimit: 6.6,
					Reading: alerts.Number(52 + float64(k)), Expected: alerts.Number(50 + float64(k)), Band: 1.2, BandCoverage: 0.95})
			}
			f.open = append(f.open, r)
		}
		if u%10 == 7 { // a stuck sensor, acknowledged
			f.open = append(f.open, alerts.Record{ID: name + "-q", Revision: 2, Kind: alerts.KindIncident, Unit: name, Group: alerts.GroupQuality,
				Start: now.Add(-2 * time.Hour), Updated: now, State: "active", Severity: "low", Caution: alerts.Caution,
				Quality:      &alerts.RecordQuality{Kind: "stuck", Channel: v.Channels[4]},
				Peak:         alerts.Peak{Statistic: "stuck", Value: 1, Limit: 1, Ratio: 1, Time: now.Add(-2 * time.Hour)},
				Acknowledged: &alerts.Ack{By: "operator-b", At: now.Add(-time.Hour), Comment: "transmitter replaced tomorrow"}})
		}
	}
	for k := 0; k < 200; k++ {
		name := fmt.Sprintf("unit%02d", k%units)
		s := now.Add(-time.Duration(200-k) * 7 * time.Minute)
		e := s.Add(5 * time.Minute)
		f.recs = append(f.recs, alerts.Record{ID: fmt.Sprintf("%s-old%d", name, k), Revision: 3, Kind: alerts.KindIncident, Unit: name,
			Group: alerts.GroupModel, Start: s, End: &e, Updated: e, State: "normal", Severity: "low", EndReason: alerts.EndReturned,
			Peak: alerts.Peak{Statistic: "spe", Value: 1.2, Limit: 1, Ratio: 1.2, Time: s}, Caution: alerts.Caution})
	}
	f.recs = append(f.recs, f.open...)
	return f
}

package pipeline

import (
	"math"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/tracker"
)

// alarmStats returns the statistics of the unit's model settings that
// raise alarms (model.statistics; the default when it does not parse,
// which validation has already reported).
func alarmStats(m configs.Model) configs.Statistics {
	st, err := configs.ParseStatistics(m.Over(configs.DefaultModel()).Statistics)
	if err != nil {
		st, _ = configs.ParseStatistics(configs.DefaultStatistics)
	}
	return st
}

// statNames lists the alarm statistics in their fixed order (the slots of
// Unit.sm and of the ratio recorder).
var statNames = [nStatistics]string{alerts.StatT2, alerts.StatSPE, alerts.StatPhi,
	alerts.StatResidual, alerts.StatVariance, alerts.StatRelation, alerts.StatMewma, alerts.StatCreep}

// StatisticNames returns the names of the alarm statistics in their fixed
// order (the order in which a calibration's per-statistic scales are
// shown).
func StatisticNames() []string { return append([]string(nil), statNames[:]...) }

// The slots of the statistics in statNames.
const (
	slotT2 = iota
	slotSPE
	slotPhi
	slotResidual
	slotVariance
	slotRelation
	slotMewma
	slotCreep
)

// statSlots returns, in the order of statNames, whether each statistic
// raises alarms (model.statistics) and its value and limit in score s
// (unscaled; statFields).
func (u *Unit) statSlots(s *tracker.Score) (on [nStatistics]bool, val, lim [nStatistics]float64) {
	st := u.stats
	on = [nStatistics]bool{st.T2, st.SPE, st.Phi, st.Residual, st.Variance, st.Relation, st.Mewma, st.Creep}
	for k := range val {
		v, l := statFields(s, k)
		val[k], lim[k] = *v, *l
	}
	return on, val, lim
}

// frameStats computes the unit's alarm statistics of score s, chosen by
// model.statistics, into u.last, unscaled. With model.smoothing λ each is
// replaced by the EWMA of its ratio to its limit, r̃ ← (1 − λ)r̃ + λr,
// against a limit of 1 (the smoothed statistic's own threshold comes from
// the budget calibration, which multiplies it). Call once per frame.
func (u *Unit) frameStats(s *tracker.Score) {
	on, val, lim := u.statSlots(s)
	u.last = u.last[:0]
	for k := range on {
		if !on[k] || (k >= 3 && !(lim[k] > 0)) {
			continue
		}
		v, l := val[k], lim[k]
		if lam := u.smooth; lam > 0 && lam < 1 {
			if l > 0 && !math.IsInf(l, 0) && !math.IsNaN(v) && !math.IsInf(v, 0) {
				r := v / l
				if u.smOK[k] {
					u.sm[k] += lam * (r - u.sm[k])
				} else {
					u.sm[k], u.smOK[k] = r, true
				}
			}
			if !u.smOK[k] {
				continue
			}
			v, l = u.sm[k], 1
		}
		u.last = append(u.last, alerts.Stat{Name: statNames[k], Value: v, Limit: l})
	}
}

// limitScale returns the factor of the budget calibration on every limit
// of the unit (1 without one): the limits the alarms use, which the
// views and the scores output show.
func (u *Unit) limitScale() float64 {
	if c := u.scale; c > 0 && !math.IsInf(c, 0) {
		return c
	}
	return 1
}

// statScale returns the budget calibration's factor on the limit of
// statistic k (in the order of statNames): its own scale when the
// calibration gave one, else the unit's.
func (u *Unit) statScale(k int) float64 {
	if c := u.scales[k]; c > 0 && !math.IsInf(c, 0) {
		return c
	}
	return u.limitScale()
}

// StatScale returns the factor the limit of statistic name (alerts.StatT2,
// ...) carries beyond the tracker's (the budget calibration; 1 without
// one).
func (u *Unit) StatScale(name string) float64 {
	for k, n := range statNames {
		if n == name {
			return u.statScale(k)
		}
	}
	return u.limitScale()
}

// mewmaRel returns the factor by which the budget calibration raises the
// MEWMA statistic's limit over the RBC index's (φ): the tracker ranks the
// contributors by the MEWMA statistic only when it is further over its
// own alarm limit than φ over its (tracker.SetMewmaScale).
func (u *Unit) mewmaRel() float64 { return u.statScale(slotMewma) / u.statScale(slotPhi) }

// creepRel is mewmaRel for the creep statistic (tracker.SetCreepScale).
func (u *Unit) creepRel() float64 { return u.statScale(slotCreep) / u.statScale(slotPhi) }

// setCalibration sets the unit's budget calibration (nil or unusable:
// none).
func (u *Unit) setCalibration(c *Calibration) {
	u.scale, u.cal, u.scales = 1, nil, [nStatistics]float64{}
	if c == nil || !(c.Scale > 0) || math.IsInf(c.Scale, 0) {
		return
	}
	u.scale, u.cal = c.Scale, c
	for k, n := range statNames {
		if v, ok := c.Scales[n]; ok && v > 0 && !math.IsInf(v, 0) {
			u.scales[k] = v
		}
	}
}

// LimitScale returns the factor the unit's alarm limits carry beyond the
// tracker's (the budget calibration; 1 without one).
func (u *Unit) LimitScale() float64 { return u.limitScale() }

// DropCalibration removes the unit's budget calibration: its limits are
// the tracker's again (empirical limits set on the tracker replace it).
func (u *Unit) DropCalibration() { u.setCalibration(nil) }

// leadRelation puts the channels of the broken relation first among the
// frame's contributors when the relation statistic (model.statistics rel)
// is over its limit, so that an alert opened by it names that relation:
// its channels in their order, those already ranked keeping their figures,
// the others with zero share and RBC (their contribution to the RBC index
// was below the reported ones); the other contributors follow in rank.
func (u *Unit) leadRelation(o *alerts.Observation, s *tracker.Score) {
	if !u.stats.Relation || s.RelationMode < 0 || !(s.Relation > s.RelationLimit*u.statScale(slotRelation)) {
		return
	}
	supp := u.tr.RelationSupport(s.RelationMode)
	if len(supp) == 0 {
		return
	}
	tmp := u.ctmp[:0]
	in := func(name string) bool {
		for _, i := range supp {
			if u.names[u.base(i)] == name {
				return true
			}
		}
		return false
	}
	for _, i := range supp {
		c := alerts.Contributor{Channel: u.names[u.base(i)]}
		if u.listed(tmp, u.base(i)) {
			continue // the same channel at another lag (model.lags)
		}
		for _, x := range o.Contributors {
			if x.Channel == c.Channel {
				c = x
				break
			}
		}
		tmp = append(tmp, c)
	}
	for _, x := range o.Contributors {
		if !in(x.Channel) {
			tmp = append(tmp, x)
		}
	}
	o.Contributors = append(o.Contributors[:0], tmp...)
	u.ctmp = tmp
}

// appendStats appends the unit's alarm statistics of the current frame
// (u.last) to dst with every limit multiplied by its budget scale.
func (u *Unit) appendStats(dst []alerts.Stat) []alerts.Stat {
	for _, x := range u.last {
		x.Limit *= u.StatScale(x.Name)
		dst = append(dst, x)
	}
	return dst
}

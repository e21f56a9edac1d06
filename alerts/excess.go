package alerts

import "slices"

// Contributors of a model incident, by their excess over the incident.
//
// A record used to name the contributors of the one frame of the
// incident's peak. A slow fault spreads: a sensor that drifts for hours
// pulls the model's other relations with it, and by the frame where the
// statistic peaks, hours in, the channels it smeared into can lead that
// single frame while the drifting sensor was over its own limit on every
// frame before. So each channel's evidence is summed over the incident:
//
//	Eᵢ = Σₜ max(0, RBCᵢ(t)/limᵢ(t) − 1)
//
// over the frames t folded into the incident while a statistic of the
// unit is in alarm, RBCᵢ the channel's reconstruction-based contribution
// and limᵢ its own control limit (Alcalá & Qin 2009). Only a contribution
// over its own limit adds, by how far and how long it stays there: the
// one-sided cumulative sum of the exceedance with a reference of one limit
// (Page 1954's CUSUM with its reference at the limit; a design choice of
// this project, not a published contribution rule). The record lists the
// channels with Eᵢ > 0 first, largest first, each with its reading,
// expected value and band at the frame where its own RBCᵢ/limᵢ was
// largest; then the peak frame's other contributors in their order.
//
// Chosen on the realism suite over twenty seeds of each plant against the
// peak frame's contributors alone: faults with a faulty channel in the top
// three +12 −3, nothing else moved (README, Validation, Contributors by
// their excess over the incident); each channel's mean share of the index
// and each channel's largest RBCᵢ/limᵢ were measured too (+11 −16 and
// +14 −10).

// chanExcess is one channel's evidence over a model incident: Sum is its
// Eᵢ, Best its contributor entry at the frame of its largest RBC/limit.
type chanExcess struct {
	Sum  float64           `json:"sum"`
	Best RecordContributor `json:"best"`
}

// ratio is Best's RBC over its limit.
func (c *chanExcess) ratio() float64 { return c.Best.RBC / c.Best.RBCLimit }

// addExcess folds the contributors of frame o into inc's excess sums when
// a statistic of the unit is in alarm. It allocates only when a channel
// is over its own limit for the first time in the incident (at most the
// unit's channels).
func (inc *incident) addExcess(o *Observation) {
	in := false
	for k := range inc.u.stats {
		if inc.u.stats[k].State().InAlarm() {
			in = true
			break
		}
	}
	if !in {
		return
	}
	for i := range o.Contributors {
		c := &o.Contributors[i]
		rbc, lim := finite(c.RBC), finite(c.Limit)
		if !(lim > 0) || !(rbc > lim) {
			continue
		}
		r := rbc / lim
		j := slices.IndexFunc(inc.excess, func(e chanExcess) bool { return e.Best.Channel == c.Channel })
		if j < 0 {
			inc.excess = append(inc.excess, chanExcess{})
			j = len(inc.excess) - 1
		}
		e := &inc.excess[j]
		e.Sum += r - 1
		if e.Best.Channel == "" || r > e.ratio() {
			d := &e.Best
			d.Channel = c.Channel
			d.Share = min(max(finite(c.Share), 0), 1)
			d.RBC, d.RBCLimit = rbc, lim
			d.Modes = append(d.Modes[:0], c.Modes...)
			d.setExpected(c)
		}
	}
}

// mergeExcess adds later's excess sums into earlier's (a merge of two
// incidents), keeping each channel's larger peak.
func mergeExcess(earlier, later *incident) {
	for _, l := range later.excess {
		j := slices.IndexFunc(earlier.excess, func(e chanExcess) bool { return e.Best.Channel == l.Best.Channel })
		if j < 0 {
			l.Best.Modes = slices.Clone(l.Best.Modes)
			earlier.excess = append(earlier.excess, l)
			continue
		}
		e := &earlier.excess[j]
		e.Sum += l.Sum
		if l.ratio() > e.ratio() {
			e.Best = l.Best
			e.Best.Modes = slices.Clone(l.Best.Modes)
		}
	}
}

// recordContributors appends to dst the contributors of inc's record: the
// channels with an excess, largest sum first (ties in the order they first
// went over their limit), then the peak frame's other contributors, at
// most n in all, ranked from 1. The Modes slices are copies.
func (inc *incident) recordContributors(dst []RecordContributor, n int) []RecordContributor {
	order := make([]int, len(inc.excess))
	for i := range order {
		order[i] = i
	}
	slices.SortStableFunc(order, func(a, b int) int {
		sa, sb := inc.excess[a].Sum, inc.excess[b].Sum
		switch {
		case sa > sb:
			return -1
		case sa < sb:
			return 1
		}
		return 0
	})
	add := func(c RecordContributor) {
		c.Rank = len(dst) + 1
		c.Modes = slices.Clone(c.Modes)
		if c.Modes == nil {
			c.Modes = []int{}
		}
		dst = append(dst, c)
	}
	for _, i := range order {
		if len(dst) == n {
			return dst
		}
		add(inc.excess[i].Best)
	}
	for _, c := range inc.contrib {
		if len(dst) == n {
			break
		}
		if slices.ContainsFunc(inc.excess, func(e chanExcess) bool { return e.Best.Channel == c.Channel }) {
			continue
		}
		add(c)
	}
	return dst
}

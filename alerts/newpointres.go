package alerts

import "math"

// A new operating point beyond the mode plane.
//
// The sparse modes name a few channels each (their cardinality is a
// setting), so a driver that moves every channel of a large unit at once
// (the heat load over every substation of a network, the weather) is no
// mode of its own: its normal variation lies off the mode plane, in the
// residual. SPE, the squared Euclidean distance from the plane,
//
//	SPE = ‖(I − PPᵀ)z‖²,
//
// then grows with such a move as it grows with a broken relation, while
// the residual Mahalanobis statistic weighs the same residual by the
// learned covariance,
//
//	res = zᵀΩz − T²  (Ω the inverse of the learned correlation matrix),
//
// so that a move along a direction of large normal variance stays small
// in it and a move across the learned relations (a channel leaving the
// others) is large. D² = zᵀΩz = T² + res splits the Mahalanobis distance
// of the frame between the modes and the rest (Jackson, "A User's Guide to
// Principal Components", Wiley 1991, §1.7 and §2.9, from memory). With
// the reading on (Rules.NoPointByResidual unset), a unit that scores res has its new operating
// point judged by res alone: SPE and φ over their limits with res within
// its own are a move of the unit along relations it has learned, read as
// T² is read by the rule of newpoint.go (once per AcceptAfter, escalating
// when res goes over its limit, one channel comes to explain the excess,
// or the move statistics stay in alarm PointSettle after the record).
// Such a move off the mode plane must be spread wider than one along the
// modes: no channel of the frame may explain Rules.SpecificShare of the
// index (the share at which a frame names a place of its own, reopen.go),
// where a move in T² alone may leave PointShare to one channel, because a
// mode's excess falls on its few channels by construction, while a driver
// the modes cannot hold moves many channels, each a little. A unit that
// does not score res keeps SPE a break.

// DefaultPointByResidual is the default of the reading (alerts.new_point_res;
// Rules.NoPointByResidual turns it off): on
// (chosen over twenty seeds of every realism plant and the demo, see the
// README, A move off the mode plane).
const DefaultPointByResidual = true

// pointReading is how the new-operating-point rule reads one frame.
type pointReading struct {
	ratio float64 // the largest ratio to its limit of a move statistic (0: none scored)
	stat  string  // that statistic
	t2    float64 // T²'s ratio to its limit (0: not scored)
	// top is the largest share of the index one contributor of the frame
	// explains (read only when speMoves).
	top float64
	// speMoves: SPE and φ read as moves, and SPE is no break
	// (the reading on, Rules.NoPointByResidual, and res scored on the frame).
	speMoves bool
}

// readPoint returns how u's new-operating-point rule reads frame o: T²'s
// ratio to its limit, or, unless Rules.NoPointByResidual, on a frame that
// scores res, the largest ratio of T², SPE and φ.
func (u *unit) readPoint(o *Observation) pointReading {
	rd := pointReading{stat: StatT2}
	if !u.rules.NoPointByResidual {
		for i := range o.Stats {
			if s := &o.Stats[i]; s.Name == StatResidual && s.Limit > 0 && !math.IsInf(s.Limit, 0) {
				rd.speMoves = true
				break
			}
		}
	}
	for i := range o.Stats {
		s := &o.Stats[i]
		k := statIndex(s.Name)
		if k != 0 && !(rd.speMoves && (k == 1 || k == 2)) {
			continue
		}
		if s.Limit > 0 && !math.IsInf(s.Limit, 0) && !math.IsNaN(s.Value) {
			r := s.Value / s.Limit
			if k == 0 {
				rd.t2 = r
			}
			if r > rd.ratio {
				rd.ratio, rd.stat = r, s.Name
			}
		}
	}
	if rd.speMoves {
		for i := range o.Contributors {
			rd.top = max(rd.top, o.Contributors[i].Share)
		}
	}
	return rd
}

// offPlane reports whether rd reads a move off the mode plane: SPE or φ
// over its limit with T² within its own.
func (rd pointReading) offPlane() bool { return rd.speMoves && rd.ratio > 1 && rd.t2 <= 1 }

// concentrated reports whether frame o, read as rd, is no move of u but
// an excess one channel explains. along: T² is over its limit and the
// first leading channel explains PointShare of the index (Concentrated);
// conc: along, or a move off the mode plane (rd.offPlane) in which some
// channel explains Rules.SpecificShare of the index, the share at which a
// frame names a place of its own (reopen.go): a driver that moves the
// unit off the plane moves the many channels no sparse mode holds, each
// explaining a small part. With Rules.NoPointByResidual conc is along.
func (u *unit) concentrated(o *Observation, rd pointReading) (along, conc bool) {
	along = rd.t2 > 1 && Concentrated(o)
	return along, along || (rd.offPlane() && rd.top >= u.rules.SpecificShare)
}

// breaks reports whether statistic k is one the rule reads as a break of
// the relations under rd: every statistic but T² and φ, and but SPE too
// when SPE reads as a move.
func (rd pointReading) breaks(k int) bool {
	return k != 0 && k != 2 && !(rd.speMoves && k == 1)
}

// display returns rd's statistic as the records' texts write it.
func (rd pointReading) display() string {
	switch rd.stat {
	case StatSPE:
		return "SPE"
	case StatPhi:
		return "φ"
	}
	return "T²"
}

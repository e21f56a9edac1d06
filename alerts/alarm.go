package alerts

import (
	"fmt"
	"math"
	"math/bits"
	"time"
)

// State is the condition state of one alarm.
type State uint8

const (
	Normal     State = iota // below the limit (or back for the off-delay)
	Confirming              // over the limit in fewer than N of the last M frames
	Active                  // in alarm
	Clearing                // below limit·(1 − deadband), off-delay running
)

var stateNames = [...]string{"normal", "confirming", "active", "clearing"}

// String returns the state's lower-case name.
func (s State) String() string {
	if int(s) < len(stateNames) {
		return stateNames[s]
	}
	return fmt.Sprintf("State(%d)", s)
}

// MarshalText encodes the state as its name.
func (s State) MarshalText() ([]byte, error) { return []byte(s.String()), nil }

// UnmarshalText reads a state name.
func (s *State) UnmarshalText(b []byte) error {
	for i, n := range stateNames {
		if n == string(b) {
			*s = State(i)
			return nil
		}
	}
	return fmt.Errorf("alerts: unknown state %q", b)
}

// InAlarm reports whether the state counts as "in alarm" (active or
// clearing): the alert record stays open.
func (s State) InAlarm() bool { return s == Active || s == Clearing }

// AlarmRule is the timing of one alarm.
type AlarmRule struct {
	// N of the last M frames over the limit make the alarm active
	// (1 ≤ N ≤ M ≤ 64).
	N, M int
	// OnHold: the alarm must also have been confirming this long.
	OnHold time.Duration
	// OffDelay: the ratio must stay below 1 − Deadband this long.
	OffDelay time.Duration
	// Deadband as a fraction of the limit, in [0, 1).
	Deadband float64
}

// Alarm is the state machine of one alarm. It is driven by the ratio
// r = value/limit of each frame and the frame time:
//
//	over:  r > 1                 clear: r < 1 − Deadband
//	normal     → confirming  on the first over frame
//	confirming → active      when over in ≥ N of the last M frames and confirming ≥ OnHold
//	confirming → normal      when none of the last M frames is over
//	active     → clearing    on a clear frame (→ normal at once if OffDelay = 0)
//	clearing   → active      on a frame that is not clear
//	clearing   → normal      when clear for ≥ OffDelay since entering clearing
//
// (OPC UA Part 9, Annex B.1.5 semantics of on-delay, off-delay and deadband.)
// The zero Alarm is in Normal; Step allocates nothing.
type Alarm struct {
	rule   AlarmRule
	state  State
	window uint64 // bit i = over in the i-th most recent frame
	since  time.Time
}

// MaxOnWindow is the longest on-delay window M an Alarm keeps (its window
// is a 64-bit mask).
const MaxOnWindow = 64

// NewAlarm returns an alarm in Normal with rule r; it panics if r is
// invalid (programmer error: rules are validated with the Config).
func NewAlarm(r AlarmRule) Alarm {
	if r.N < 1 || r.M < r.N || r.M > MaxOnWindow || r.Deadband < 0 || r.Deadband >= 1 || r.OnHold < 0 || r.OffDelay < 0 {
		panic(fmt.Sprintf("alerts: invalid alarm rule %+v", r))
	}
	return Alarm{rule: r}
}

// State returns the current state.
func (a *Alarm) State() State { return a.state }

// Since returns the frame time the current state was entered.
func (a *Alarm) Since() time.Time { return a.since }

// Step feeds one frame at time t with statistic value v and limit l and
// returns the state before and after. A frame with a non-finite value or a
// limit that is not finite and positive carries no evidence and changes
// nothing (ok false).
func (a *Alarm) Step(t time.Time, v, l float64) (from, to State, ok bool) {
	from = a.state
	if math.IsNaN(v) || math.IsInf(v, 0) || !(l > 0) || math.IsInf(l, 0) {
		return from, from, false
	}
	r := v / l
	over := r > 1
	clear := r < 1-a.rule.Deadband
	switch a.state {
	case Normal, Confirming:
		a.push(over)
		if a.state == Normal {
			if !over {
				return from, from, true
			}
			a.state, a.since = Confirming, t
		}
		n := bits.OnesCount64(a.window)
		switch {
		case n >= a.rule.N && t.Sub(a.since) >= a.rule.OnHold:
			a.state, a.since = Active, t
		case n == 0:
			a.reset(t)
		}
	case Active:
		if clear {
			a.state, a.since = Clearing, t
			if a.rule.OffDelay == 0 {
				a.reset(t)
			}
		}
	case Clearing:
		switch {
		case !clear:
			a.state, a.since = Active, t
		case t.Sub(a.since) >= a.rule.OffDelay:
			a.reset(t)
		}
	}
	return from, a.state, true
}

// Reset puts the alarm back in Normal at time t (maintenance).
func (a *Alarm) Reset(t time.Time) { a.reset(t) }

func (a *Alarm) reset(t time.Time) {
	a.state, a.since, a.window = Normal, t, 0
}

func (a *Alarm) push(over bool) {
	a.window <<= 1
	if over {
		a.window |= 1
	}
	if a.rule.M < 64 {
		a.window &= 1<<uint(a.rule.M) - 1
	}
}

// WindowProbability is the probability that a window of m independent
// frames, each over the limit with probability α, holds at least n
// exceedances (the per-frame false-alarm probability of the n-of-m
// on-delay; a binomial tail):
//
//	P = Σ_{k=n..m} C(m,k) αᵏ (1−α)^{m−k}
func WindowProbability(alpha float64, n, m int) float64 {
	p := 0.0
	c := 1.0 // C(m, k), built up from C(m, 0)
	for k := 0; k <= m; k++ {
		if k > 0 {
			c = c * float64(m-k+1) / float64(k)
		}
		if k >= n {
			p += c * math.Pow(alpha, float64(k)) * math.Pow(1-alpha, float64(m-k))
		}
	}
	return p
}

// ConsecutiveRunLength is the expected number of independent frames until
// the first run of n consecutive exceedances, each with probability α
// (Feller, An Introduction to Probability Theory, vol. I, ch. XIII):
//
//	E = (1 − αⁿ) / ((1 − α) αⁿ)
func ConsecutiveRunLength(alpha float64, n int) float64 {
	an := math.Pow(alpha, float64(n))
	return (1 - an) / ((1 - alpha) * an)
}

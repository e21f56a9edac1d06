package pipeline

import (
	"math"
	"slices"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// ScoreMeasurement is the line-protocol measurement of score lines.
const ScoreMeasurement = "modewatch_scores"

// ScoreEncoder writes one line-protocol line per unit and frame:
//
//	modewatch_scores,unit=<unit> t2=…,t2_limit=…,spe=…,spe_limit=…,phi=…,phi_limit=…,missing=<n>i,state="adapting" <frame time>
//
// with res, var and rel (and their _limit) added when model.statistics
// raises alarms on them.
// The statistics are left out during warm-up (and where a value is not
// finite, which line protocol cannot carry); missing and state are always
// present. Timestamps are in nanoseconds.
//
// It allocates nothing per line once its buffer has grown (it runs for
// every unit and frame): values go in through lineprotocol.FloatValue and
// StringValue, not the boxing NewValue, and the limit keys are built once.
type ScoreEncoder struct {
	enc lineprotocol.Encoder
}

// Append encodes the latest score of u at frame time t and returns the
// encoder's buffer, which holds every line appended since the last Reset.
func (e *ScoreEncoder) Append(u *Unit, t time.Time) []byte {
	s := &u.score
	e.enc.StartLine(ScoreMeasurement)
	e.enc.AddTag("unit", u.Name)
	if s.Ready {
		for _, f := range [...]struct {
			key string
			v   float64
		}{{"t2", s.T2}, {"t2_limit", u.statScale(slotT2) * s.T2Limit}, {"spe", s.SPE}, {"spe_limit", u.statScale(slotSPE) * s.SPELimit}, {"phi", s.Phi}, {"phi_limit", u.statScale(slotPhi) * s.PhiLimit}} {
			if v, ok := lineprotocol.FloatValue(f.v); ok { // false: not finite
				e.enc.AddField(f.key, v)
			}
		}
		// The other alarm statistics of model.statistics (res, var, rel),
		// as the alarms see them (smoothed ratios with model.smoothing).
		for _, x := range u.last {
			k := slices.Index(statNames[:], x.Name)
			if k < 3 { // t2, spe, phi above (or a name of no statistic)
				continue
			}
			v, ok := lineprotocol.FloatValue(x.Value)
			l, lok := lineprotocol.FloatValue(u.statScale(k) * x.Limit)
			if ok && lok && !math.IsInf(x.Limit, 0) {
				e.enc.AddField(x.Name, v)
				e.enc.AddField(statLimitKeys[k], l)
			}
		}
	}
	e.enc.AddField("missing", lineprotocol.IntValue(int64(len(s.Missing))))
	if v, ok := lineprotocol.StringValue(u.ModelState()); ok {
		e.enc.AddField("state", v)
	}
	e.enc.EndLine(t)
	return e.enc.Bytes()
}

// Reset empties the buffer.
func (e *ScoreEncoder) Reset() { e.enc.Reset() }

// Err returns the first encoding error (a unit name line protocol cannot
// carry), and clears it.
func (e *ScoreEncoder) Err() error {
	err := e.enc.Err()
	e.enc.ClearErr()
	return err
}

// statLimitKeys holds the line-protocol key of each statistic's limit, in
// the order of statNames.
var statLimitKeys = func() (k [nStatistics]string) {
	for i, n := range statNames {
		k[i] = n + "_limit"
	}
	return k
}()

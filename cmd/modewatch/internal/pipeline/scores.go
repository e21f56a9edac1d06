package pipeline

import (
	"math"
	"time"

	"modewatch/alerts"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// ScoreMeasurement is the line-protocol measurement of score lines.
const ScoreMeasurement = "modewatch_scores"

// ScoreEncoder writes one line-protocol line per unit and frame:
//
//	modewatch_scores,unit=<unit> t2=…,t2_limit=…,spe=…,spe_limit=…,phi=…,phi_limit=…,missing=<n>i,state="adapting" <frame start>
//
// with res, var and rel (and their _limit) added when model.statistics
// raises alarms on them.
// The statistics are left out during warm-up (and where a value is not
// finite, which line protocol cannot carry); missing and state are always
// present. Timestamps are in nanoseconds.
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
		}{{"t2", s.T2}, {"t2_limit", u.statScale(0) * s.T2Limit}, {"spe", s.SPE}, {"spe_limit", u.statScale(1) * s.SPELimit}, {"phi", s.Phi}, {"phi_limit", u.statScale(2) * s.PhiLimit}} {
			if !math.IsNaN(f.v) && !math.IsInf(f.v, 0) {
				e.enc.AddField(f.key, lineprotocol.MustNewValue(f.v))
			}
		}
		// The other alarm statistics of model.statistics (res, var, rel),
		// as the alarms see them (smoothed ratios with model.smoothing).
		for _, x := range u.last {
			if x.Name == alerts.StatT2 || x.Name == alerts.StatSPE || x.Name == alerts.StatPhi {
				continue
			}
			if !math.IsNaN(x.Value) && !math.IsInf(x.Value, 0) && !math.IsInf(x.Limit, 0) && !math.IsNaN(x.Limit) {
				e.enc.AddField(x.Name, lineprotocol.MustNewValue(x.Value))
				e.enc.AddField(x.Name+"_limit", lineprotocol.MustNewValue(u.StatScale(x.Name)*x.Limit))
			}
		}
	}
	e.enc.AddField("missing", lineprotocol.IntValue(int64(len(s.Missing))))
	e.enc.AddField("state", lineprotocol.MustNewValue(u.ModelState()))
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

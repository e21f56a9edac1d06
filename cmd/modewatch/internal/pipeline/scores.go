package pipeline

import (
	"math"
	"time"

	"github.com/influxdata/line-protocol/v2/lineprotocol"
)

// ScoreMeasurement is the line-protocol measurement of score lines.
const ScoreMeasurement = "modewatch_scores"

// ScoreEncoder writes one line-protocol line per unit and frame:
//
//	modewatch_scores,unit=<unit> t2=…,t2_limit=…,spe=…,spe_limit=…,phi=…,phi_limit=…,missing=<n>i,state="adapting" <frame start>
//
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
		c := u.limitScale()
		for _, f := range [...]struct {
			key string
			v   float64
		}{{"t2", s.T2}, {"t2_limit", c * s.T2Limit}, {"spe", s.SPE}, {"spe_limit", c * s.SPELimit}, {"phi", s.Phi}, {"phi_limit", c * s.PhiLimit}} {
			if !math.IsNaN(f.v) && !math.IsInf(f.v, 0) {
				e.enc.AddField(f.key, lineprotocol.MustNewValue(f.v))
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

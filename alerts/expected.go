package alerts

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"time"
)

// Number is a measured value in a channel's engineering unit that may be
// unknown: NaN or ±Inf (no reconstruction) is written as JSON null and
// null reads back as NaN.
type Number float64

// MarshalJSON writes the number, or null when it is not finite.
func (n Number) MarshalJSON() ([]byte, error) {
	v := float64(n)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return json.Marshal(v)
}

// UnmarshalJSON reads a number or null (NaN).
func (n *Number) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*n = Number(math.NaN())
		return nil
	}
	var v float64
	if err := json.Unmarshal(b, &v); err != nil {
		return fmt.Errorf("alerts: number: %w", err)
	}
	*n = Number(v)
	return nil
}

// Known reports whether n is finite.
func (n Number) Known() bool { return !math.IsNaN(float64(n)) && !math.IsInf(float64(n), 0) }

// Expectation says in engineering terms what is wrong with the channel:
//
//	pump02.flow reads 71.2, expected 64.0 ± 1.1
//
// (the reading, the value the other channels imply under the model and
// the half-width of its band, all in the channel's unit; the digits follow
// the band's size). Without an expected value it names only the reading,
// and with no reading only the channel.
func (c *RecordContributor) Expectation() string {
	if !c.Reading.Known() {
		return c.Channel
	}
	band := float64(c.Band)
	dec := 2
	if c.Expected.Known() && band > 0 && c.Band.Known() {
		dec = min(max(1-int(math.Floor(math.Log10(band))), 0), 6)
	}
	f := func(v float64) string { return strconv.FormatFloat(v, 'f', dec, 64) }
	if !c.Expected.Known() {
		return c.Channel + " reads " + f(float64(c.Reading))
	}
	return c.Channel + " reads " + f(float64(c.Reading)) + ", expected " + f(float64(c.Expected)) + " ± " + f(band)
}

// setExpected copies the reading, expected value and band of c, which
// count only when c.BandCoverage is in (0, 1) (else all are unknown).
func (d *RecordContributor) setExpected(c *Contributor) {
	nan := Number(math.NaN())
	d.Reading, d.Expected, d.Band, d.BandCoverage = nan, nan, nan, 0
	if !(c.BandCoverage > 0 && c.BandCoverage < 1) {
		return
	}
	d.Reading = Number(c.Reading)
	if Number(c.Expected).Known() && Number(c.Band).Known() && c.Band >= 0 {
		d.Expected, d.Band, d.BandCoverage = Number(c.Expected), Number(c.Band), c.BandCoverage
	}
}

// Describe says what a data-quality record found, in the channel's terms:
// its kind and channel and, for a level shift with its size,
//
//	level_shift air.header.pressure: 6.80 → 7.20 (means over 5m0s before and after), 0.38 not explained by the other channels
//
// (the digits follow the unexplained step's size, as Expectation's follow
// the band's).
func (q *RecordQuality) Describe() string {
	s := q.Kind + " " + q.Channel
	l := q.Level
	if l == nil || !l.Before.Known() || !l.After.Known() || !l.Step.Known() {
		return s
	}
	dec := 2
	if a := math.Abs(float64(l.Step)); a > 0 {
		dec = min(max(1-int(math.Floor(math.Log10(a))), 0), 6)
	}
	f := func(v Number) string { return strconv.FormatFloat(float64(v), 'f', dec, 64) }
	return s + ": " + f(l.Before) + " → " + f(l.After) + " (means over " + time.Duration(l.Window).String() +
		" before and after), " + f(l.Step) + " not explained by the other channels"
}

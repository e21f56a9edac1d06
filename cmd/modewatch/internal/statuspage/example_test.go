package statuspage_test

import (
	"fmt"
	"math"
	"time"

	"modewatch/cmd/modewatch/internal/statuspage"
)

// A unit's T² over four minutes at one point per minute: each point keeps
// the frame with the largest value/limit ratio, so the one frame over the
// limit in the second minute is not averaged away.
func ExampleHistory_Trend() {
	h := statuspage.NewHistory(time.Minute, 60, 0)
	t0 := time.Date(2026, 3, 3, 8, 0, 0, 0, time.UTC)
	nan := math.NaN()
	for k := 0; k < 10; k++ { // a frame every 20 s; the fifth is over the limit
		t2 := 4.0 + float64(k%3)
		if k == 4 {
			t2 = 15
		}
		h.Add("boiler", t0.Add(time.Duration(k)*20*time.Second), statuspage.Stats{T2: t2, T2Limit: 12, SPE: nan, SPELimit: nan, Phi: nan, PhiLimit: nan})
	}
	tr, _ := h.Trend("boiler", t0.Add(3*time.Minute), 4*time.Minute, 4)
	for i, v := range tr.T2.Value {
		fmt.Printf("%s  T² %g of limit %g\n", tr.Start.Add(time.Duration(i)*time.Duration(tr.StepS)*time.Second).Format("15:04"), *v, *tr.T2.Limit[i])
	}
	// Output:
	// 08:00  T² 6 of limit 12
	// 08:01  T² 15 of limit 12
	// 08:02  T² 6 of limit 12
	// 08:03  T² 4 of limit 12
}

package alerts_test

import (
	"context"
	"fmt"
	"time"

	"modewatch/alerts"
)

// An SPE excursion of a cooling-water unit: three frames over the limit
// raise one alert naming the channels to look at; an operator acknowledges
// it; the statistic falls back below the deadband and, after the
// off-delay, the alert ends.
func ExampleEngine() {
	pub := alerts.PublisherFunc(func(r *alerts.Record) {
		end := "open"
		if r.End != nil {
			end = "ended " + r.End.Format("15:04:05")
		}
		fmt.Printf("%s rev %d %s %s peak %.1f/%.1f, first %s (modes %v), %s\n",
			r.ID, r.Revision, r.Severity, r.State, r.Peak.Value, r.Peak.Limit,
			r.Contributors[0].Channel, r.Contributors[0].Modes, end)
	})
	e, err := alerts.NewEngine(alerts.Config{Rules: alerts.Rules{OffDelay: 10 * time.Second}}, pub, nil, nil)
	if err != nil {
		panic(err)
	}
	t0 := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	spe := []float64{3, 12, 13, 25, 14, 4, 4, 4}
	for i, v := range spe {
		o := alerts.Observation{
			Unit: "coolwater", Time: t0.Add(time.Duration(i*5) * time.Second), ModelState: alerts.ModelAdapting,
			Stats: []alerts.Stat{{Name: alerts.StatSPE, Value: v, Limit: 10}},
			Contributors: []alerts.Contributor{
				{Channel: "coolwater.pump2.flow", Share: 0.7, RBC: 7, Limit: 2.1, Modes: []int{0}},
				{Channel: "coolwater.pump2.temp", Share: 0.2, RBC: 2, Limit: 2.1, Modes: []int{0, 3}},
			},
		}
		if err := e.Observe(&o); err != nil {
			panic(err)
		}
		if i == 4 {
			rep := e.Handle(context.Background(), alerts.Command{Op: alerts.OpAck, AlertID: "coolwater/model/20260302T080015Z", By: "shift lead"})
			fmt.Println("ack:", rep.OK, rep.Message)
		}
	}
	// Output:
	// coolwater/model/20260302T080015Z rev 1 medium active peak 25.0/10.0, first coolwater.pump2.flow (modes [0]), open
	// coolwater/model/20260302T080015Z rev 2 medium active peak 25.0/10.0, first coolwater.pump2.flow (modes [0]), open
	// ack: true acknowledged
	// coolwater/model/20260302T080015Z rev 3 medium normal peak 25.0/10.0, first coolwater.pump2.flow (modes [0]), ended 08:00:35
}

func ExampleParseCommand() {
	c, err := alerts.ParseCommand([]byte(`{"op":"shelve","alert_id":"coolwater/model/20260302T080015Z","for":"2h","by":"jo","reason":"transmitter replaced"}`))
	fmt.Println(c.Op, time.Duration(c.For), err)
	_, err = alerts.ParseCommand([]byte(`{"op":"shelve","alert_id":"x","by":"jo"}`))
	fmt.Println(err)
	// Output:
	// shelve 2h0m0s <nil>
	// alerts: invalid command: fields "until"/"for": give exactly one; field "reason": required to shelve
}

// The per-frame false-alarm probability of the default 3-of-5 on-delay at
// a 1 % limit, against the bare limit (a binomial tail).
func ExampleWindowProbability() {
	fmt.Printf("%.4g per frame, %.4g per hour at 1 Hz\n", alerts.WindowProbability(0.01, 1, 1), alerts.WindowProbability(0.01, 1, 1)*3600)
	fmt.Printf("%.5g per frame with 3 of 5\n", alerts.WindowProbability(0.01, 3, 5))
	// Output:
	// 0.01 per frame, 36 per hour at 1 Hz
	// 9.8506e-06 per frame with 3 of 5
}

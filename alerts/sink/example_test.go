package sink_test

import (
	"context"
	"fmt"
	"os"
	"time"

	"modewatch/alerts"
	"modewatch/alerts/sink"
)

// Records of an engine go to standard output as JSON lines through a
// sink; Close delivers what is queued before it returns.
func ExampleNewSet() {
	out, err := sink.New(sink.NewLines(os.Stdout), sink.Options{Name: "stdout"})
	if err != nil {
		panic(err)
	}
	set := sink.NewSet(nil, out)
	e, err := alerts.NewEngine(alerts.Config{Rules: alerts.Rules{OnCount: 1, OnWindow: 1}}, set, nil, nil)
	if err != nil {
		panic(err)
	}
	e.Observe(&alerts.Observation{
		Unit: "boiler", Time: time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC), ModelState: alerts.ModelAdapting,
		Missing: []string{"boiler.drum.level"},
		Quality: []alerts.Quality{{Channel: "boiler.fw.flow", Kind: alerts.QualityStuck}},
	})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := set.Close(ctx); err != nil {
		panic(err)
	}
	m, _ := sink.MessageOf(&alerts.Record{ID: "boiler/stuck:boiler.fw.flow/20260302T080000Z", Revision: 1})
	fmt.Println("dedup key:", m.ID)
	// Output:
	// {"id":"boiler/stuck:boiler.fw.flow/20260302T080000Z","revision":1,"kind":"incident","unit":"boiler","group":"quality","statistics":[],"quality":{"kind":"stuck","channel":"boiler.fw.flow"},"start":"2026-03-02T08:00:00Z","end":null,"updated":"2026-03-02T08:00:00Z","state":"active","peak":{"statistic":"stuck","value":1,"limit":1,"ratio":1,"time":"2026-03-02T08:00:00Z"},"severity":"low","contributors":[],"missing":["boiler.drum.level"],"model_state":"adapting","acknowledged":null,"shelved":null,"stale_alarm":false,"chattering":null,"caution":"Advisory only: verify in the field and follow site procedures."}
	// dedup key: boiler/stuck:boiler.fw.flow/20260302T080000Z#1
}

package service

import (
	"bytes"
	"context"
	"fmt"
	"math"
	"path/filepath"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"modewatch/alerts"
	"modewatch/configs"
	"modewatch/sim"
)

// openMissingAlert publishes 500 s of invented readings of unit tk (period
// 1 s) on modewatch.readings.tk: channel b stops after 100 s, so a
// "missing" quality alert opens after its 5-minute hold; channel c starts
// at 300 s and joins the model warming. It waits (10 s at most) for the
// alert and returns its id.
func openMissingAlert(t *testing.T, svc *Service, nc *nats.Conn) string {
	t.Helper()
	id, _ := openMissingAlertAt(t, svc, nc)
	return id
}

// openMissingAlertAt is openMissingAlert, also returning the time of the
// first reading (the readings are at t0 + k s, k = 0..499).
func openMissingAlertAt(t *testing.T, svc *Service, nc *nats.Conn) (string, time.Time) {
	t.Helper()
	t0 := time.Now().Add(-time.Hour).Truncate(time.Second)
	var b bytes.Buffer
	for k := 0; k < 500; k++ {
		ts := t0.Add(time.Duration(k) * time.Second).UnixNano()
		a := 10 + math.Sin(float64(k)/7)
		switch {
		case k < 100:
			fmt.Fprintf(&b, "tk,asset=x a=%.4f,b=%.4f %d\n", a, 5+math.Cos(float64(k)/5), ts)
		case k < 300:
			fmt.Fprintf(&b, "tk,asset=x a=%.4f %d\n", a, ts)
		default: // channel c starts: it joins the model, warming
			fmt.Fprintf(&b, "tk,asset=x a=%.4f,c=%.4f %d\n", a, 1+math.Sin(float64(k)/3), ts)
		}
		if b.Len() > 32<<10 || k == 499 {
			if err := nc.Publish("modewatch.readings.tk", b.Bytes()); err != nil {
				t.Fatal(err)
			}
			b.Reset()
		}
	}
	nc.Flush()
	eng := svc.Pipeline().Alerts()
	deadline := time.Now().Add(hangBound)
	for {
		for _, r := range eng.Open(nil) {
			if r.Quality != nil && r.Quality.Kind == alerts.QualityMissing && r.Quality.Channel == "tk.x.b" {
				return r.ID, t0
			}
		}
		if time.Now().After(deadline) {
			t.Fatalf("no missing-channel alert; open: %+v", eng.Open(nil))
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// hangBound bounds the waits of these tests for something the service
// does on its own goroutines (a frame scored, an alert raised, a record
// delivered): it only stops a test that hangs, so it is far longer than
// the wait takes on a loaded 2-core machine under the race detector.
const hangBound = time.Minute

// waitConsumed waits until the service's intake has decoded n reading
// lines in all. A message's frames are scored before its lines are
// counted (Intake.Feed forms and scores the frames it completes, then
// publishes its counters), so from then on the frames and alerts of those
// lines are all there: what the aligner still holds back waits for later
// readings, not for time.
func waitConsumed(t *testing.T, svc *Service, n uint64) {
	t.Helper()
	deadline := time.Now().Add(hangBound)
	for {
		st := svc.Intake().Stats()
		if st.Lines >= n {
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("%d of %d published lines decoded (intake %+v, connection %+v)", st.Lines, n, st, svc.Conn().Stats())
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// scenarioLines counts the reading lines sim's Live publishes for sc
// (its generator's lines, as Live sends them).
func scenarioLines(t *testing.T, sc *sim.Scenario) uint64 {
	t.Helper()
	g, err := sc.NewGenerator()
	if err != nil {
		t.Fatal(err)
	}
	var n uint64
	var buf []byte
	for g.Step() {
		for u := 0; u < g.Units(); u++ {
			if buf, err = g.AppendUnit(buf[:0], u); err != nil {
				t.Fatal(err)
			}
			n += uint64(bytes.Count(buf, []byte("\n")))
		}
	}
	return n
}

// natsClient connects to the service's NATS server; closed at the end.
func natsClient(t *testing.T, svc *Service) *nats.Conn {
	t.Helper()
	nc, err := nats.Connect(svc.Info().NATS)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(nc.Close)
	return nc
}

// serviceConfig parses the test configuration "frames: {period: 1s}",
// then yaml, then a state_dir in a temporary directory.
func serviceConfig(t *testing.T, yaml string) *configs.Config {
	t.Helper()
	return serviceConfigAt(t, t.TempDir(), time.Second, yaml)
}

// serviceConfigAt parses the configuration of the YAML lines of yaml with
// the given frame period and its state under dir/data.
func serviceConfigAt(t *testing.T, dir string, period time.Duration, yaml string) *configs.Config {
	t.Helper()
	cfg, err := configs.Parse(t.Name()+".yaml", []byte("frames: {period: "+period.String()+"}\n"+yaml+"\nstate_dir: "+filepath.Join(dir, "data")+"\n"))
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

// startService starts the service with opt and shuts it down when the
// test ends, waiting at most 5 s (its connection may be down).
func startService(t *testing.T, opt Options) *Service {
	t.Helper()
	svc, err := Start(t.Context(), opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		svc.Shutdown(ctx)
	})
	return svc
}

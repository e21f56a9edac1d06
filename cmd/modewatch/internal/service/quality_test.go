package service

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"modewatch/alerts"

	"github.com/nats-io/nats.go"
)

// qLines writes frames [from, to) of a small invented plant at 1 s: unit
// sv (a machine: speed exactly 0 at rest, a 0/1 status, a live flow) and
// unit ot (two live readings). rest stops the machine, frozen holds flow
// at its value, svOff silences unit sv.
func qLines(b *bytes.Buffer, t0 time.Time, from, to int, rest, frozen, svOff func(k int) bool, rng *rand.Rand) {
	flow := 40.0
	for k := from; k < to; k++ {
		ts := t0.Add(time.Duration(k) * time.Second).UnixNano()
		running := k%600 >= 120 // stopped 2 min in every 10 in the normal log
		if rest(k) {
			running = false
		}
		speed, status := 0.0, 0
		if running {
			speed, status = 1500+5*rng.NormFloat64(), 1
		}
		if !frozen(k) {
			flow = 40 + rng.NormFloat64()
		}
		if !svOff(k) {
			fmt.Fprintf(b, "sv,asset=m speed=%.3f,status=%di,flow=%.4f %d\n", speed, status, flow, ts)
		}
		x := math.Sin(float64(k) / 50)
		fmt.Fprintf(b, "ot,asset=n a=%.4f,b=%.4f %d\n", x+0.1*rng.NormFloat64(), 2*x+0.1*rng.NormFloat64(), ts)
	}
}

// qService fits a model on normal frames [0, n) of qLines (seeded with
// seed), starts the service from it with the embedded NATS server at a
// 1 s period and the YAML lines of extra, and returns it with a client,
// the plant's start time (3 h ago) and the random source, for the frames
// that follow.
func qService(t *testing.T, seed uint64, n int, extra string) (*Service, *nats.Conn, time.Time, *rand.Rand) {
	t.Helper()
	dir := t.TempDir()
	never := func(int) bool { return false }
	rng := rand.New(rand.NewPCG(seed, seed+1))
	t0 := time.Now().Add(-3 * time.Hour).Truncate(time.Second)
	var normal bytes.Buffer
	qLines(&normal, t0, 0, n, never, never, never, rng)
	modelFile := fitFile(t, dir, time.Second, &normal)
	scfg := serviceConfigAt(t, dir, time.Second, `server: {embedded_port: -1}
model: {file: `+modelFile+`}
`+extra)
	svc, nc := startWithClient(t, Options{Config: scfg})
	return svc, nc, t0, rng
}

// TestServiceQualityRules runs the learned data-quality rules in the live
// service with its embedded NATS server (invented data; behaviour test).
// After a fit on 3000 normal frames it receives 1500 frames in which the
// machine rests 10 min (longer than any normal stop), its status holds,
// flow freezes at a live value, and unit sv's gateway is silent 60 s while
// unit ot goes on; then nothing arrives at all. Checked: no stuck alert
// from speed or status; flow stuck; a silent alert of sv by frame time
// within 3 periods of its outage, closed by its return; and, once nothing
// arrives, a silent alert of each unit by the wall clock.
func TestServiceQualityRules(t *testing.T) {
	svc, nc, t0, rng := qService(t, 3, 3000, `http: {listen: "off"}`)

	const (
		restFrom, restTo     = 3200, 3800
		freezeFrom, freezeTo = 3900, 4000
		offFrom, offTo       = 4200, 4260
		end                  = 4500
	)
	in := func(a, b int) func(int) bool { return func(k int) bool { return k >= a && k < b } }
	var b bytes.Buffer
	qLines(&b, t0, 3000, end, in(restFrom, restTo), in(freezeFrom, freezeTo), in(offFrom, offTo), rng)
	for b.Len() > 0 {
		n := min(b.Len(), 32<<10)
		chunk := b.Next(n)
		for n > 0 && chunk[n-1] != '\n' { // whole lines per message
			n--
		}
		rest := append([]byte(nil), chunk[n:]...)
		if err := nc.Publish("modewatch.readings.q", chunk[:n]); err != nil {
			t.Fatal(err)
		}
		if len(rest) > 0 {
			b2 := append(rest, b.Bytes()...)
			b.Reset()
			b.Write(b2)
		}
	}
	nc.Flush()
	at := func(k int) time.Time { return t0.Add(time.Duration(k) * time.Second) }

	// Wall clock: once nothing arrives, each unit goes silent.
	find := func(unit string, after time.Time) *alerts.Record {
		for _, r := range svc.Records() {
			if r.Unit == unit && r.Quality != nil && r.Quality.Kind == alerts.QualitySilent && r.Start.After(after) {
				return &r
			}
		}
		return nil
	}
	deadline := time.Now().Add(hangBound)
	for find("sv", at(end-10)) == nil || find("ot", at(end-10)) == nil {
		if time.Now().After(deadline) {
			t.Fatalf("no silent alert of both units by the wall clock after the readings stopped; records %+v", svc.Records())
		}
		time.Sleep(50 * time.Millisecond)
	}

	recs := svc.Records()
	count := func(kind, ch string) (n int, first *alerts.Record) {
		for i := range recs {
			if q := recs[i].Quality; q != nil && q.Kind == kind && q.Channel == ch {
				if n++; first == nil {
					first = &recs[i]
				}
			}
		}
		return n, first
	}
	for _, ch := range []string{"sv.m.speed", "sv.m.status"} {
		if n, _ := count(alerts.QualityStuck, ch); n > 0 {
			t.Errorf("%s: %d stuck alerts", ch, n)
		}
	}
	if n, r := count(alerts.QualityStuck, "sv.m.flow"); n != 1 {
		t.Errorf("flow frozen: %d stuck alerts, want 1", n)
	} else if d := r.Start.Sub(at(freezeFrom)); d > 25*time.Second {
		t.Errorf("flow stuck alert %v after the freeze", d)
	}
	var outage *alerts.Record
	for i, r := range recs {
		if r.Unit == "sv" && r.Quality != nil && r.Quality.Kind == alerts.QualitySilent && r.Start.Before(at(offTo)) {
			outage = &recs[i]
		}
	}
	switch {
	case outage == nil:
		t.Error("no silent alert of sv during its outage while ot went on")
	case outage.Start.Sub(at(offFrom)) > 3*time.Second:
		t.Errorf("silent alert %v after the outage began; want within 3 periods", outage.Start.Sub(at(offFrom)))
	case outage.End == nil || outage.End.After(at(offTo+2)):
		t.Errorf("silent alert of sv ended %v; its data returned at %v", outage.End, at(offTo))
	}
}

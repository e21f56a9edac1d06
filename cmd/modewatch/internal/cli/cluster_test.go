package cli

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"modewatch/cmd/modewatch/internal/cluster/host"
	"modewatch/sim"
	"modewatch/stream/natsource/natstest"
)

// clusterConfig returns a cluster configuration for one instance of a
// group (its durable consumers, bucket and store are named after it).
func clusterConfig(urls []string, instance, group, model, data string, units []string, ttl time.Duration) string {
	return jetStreamRunConfig(urls, group, model, data) + fmt.Sprintf(`shutdown_timeout: 30s
cluster:
  instance: %s
  units: [%s]
  bucket: %s_leases
  store: %s_checkpoints
  lease_ttl: %s
  replicas: 3
`, instance, strings.Join(units, ", "), group, group, ttl)
}

// child is one modewatch instance run as a child process.
type child struct {
	name, data string
	cmd        *exec.Cmd
}

func startChild(t *testing.T, dir, name, cfg string) *child {
	data := filepath.Join(dir, name)
	os.MkdirAll(data, 0o755)
	path := filepath.Join(data, "config.yaml")
	os.WriteFile(path, []byte(cfg), 0o644)
	if code, out, errs := runCLI(t, "", "check", "--config", path); code != ExitOK {
		t.Fatalf("check %s: %s%s", name, out, errs)
	}
	cmd := startModewatch(t, name, "run", "--config", path)
	c := &child{name: name, data: data, cmd: cmd}
	t.Cleanup(func() {
		if c.cmd.ProcessState == nil {
			c.cmd.Process.Kill()
			c.cmd.Wait()
		}
	})
	return c
}

func (c *child) stop(t *testing.T) {
	c.cmd.Process.Signal(syscall.SIGTERM)
	if err := c.cmd.Wait(); err != nil {
		t.Fatalf("%s: %v", c.name, err)
	}
}

// owners reads the unit leases of a group's bucket: unit → instance.
func owners(t *testing.T, js jetstream.JetStream, group string) map[string]string {
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	kv, err := js.KeyValue(ctx, group+"_leases")
	if err != nil {
		return nil
	}
	out := map[string]string{}
	keys, _ := kv.Keys(ctx)
	for _, k := range keys {
		if !strings.HasPrefix(k, "unit.") {
			continue
		}
		e, err := kv.Get(ctx, k)
		if err != nil {
			continue
		}
		var l struct{ Unit, Owner string }
		if json.Unmarshal(e.Value(), &l) == nil {
			out[l.Unit] = l.Owner
		}
	}
	return out
}

// until polls cond every 50 ms until it holds or within passes.
func until(t *testing.T, within time.Duration, what string, cond func() bool) time.Duration {
	t.Helper()
	start := time.Now()
	tick := time.NewTicker(50 * time.Millisecond)
	defer tick.Stop()
	for !cond() {
		if time.Since(start) > within {
			t.Fatalf("not within %v: %s", within, what)
		}
		<-tick.C
	}
	return time.Since(start)
}

// TestClusterFailover (issue 16): a 3-server NATS cluster (routes on
// loopback, replicas 3) and 3 modewatch instances as child processes share
// the demo plant's 4 units. One instance is killed (SIGKILL) half way
// through 12 hours of readings, one NATS server is shut down later, and a
// second instance is stopped gracefully while more readings arrive. At the
// end the latest revision of every alert record, the frame counters and
// last frames of the stored checkpoints, and the set of scored unit frames
// equal those of one uninterrupted instance over the same stream.
func TestClusterFailover(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a NATS cluster and child processes")
	}
	const ttl = 4 * time.Second
	dir := t.TempDir()
	cl := natstest.StartCluster(t, 3)
	var urls []string
	for _, s := range cl.Servers {
		urls = append(urls, s.ClientURL())
	}
	nc := natstest.Connect(t, cl.Servers[0]) // s1 stays up
	js, _ := jetstream.New(nc)
	ctx := context.Background()
	if _, err := js.CreateStream(ctx, jetstream.StreamConfig{Name: "READINGS", Subjects: []string{"modewatch.readings.>"},
		Storage: jetstream.FileStorage, Replicas: 3}); err != nil {
		t.Fatal(err)
	}

	sc, _ := sim.Demo()
	var units []string
	for _, u := range sc.Units {
		units = append(units, u.Name)
	}
	modelPath := fitDemoDay1(t, dir)
	// From 8 h into the test days after the split: the supply drift from
	// 12 h on and the stuck chiller return from 16 h on.
	part1 := sc.Tested()
	part1.Start = sc.Split.Add(8 * time.Hour)
	part1.Duration = 12 * time.Hour
	part2 := sc.Tested()
	part2.Start = part1.End()
	part2.Duration = 3 * time.Hour
	// publish sends a part of the scenario, one message per unit and
	// sample as sim.Live does, paced to last about dur, each publication
	// acknowledged by the stream (retried with its message id, so a
	// retry is stored once: a NATS server goes down mid-stream). The
	// channel yields once every message is stored.
	publish := func(s *sim.Scenario, dur time.Duration) chan error {
		done := make(chan error, 1)
		go func() {
			g, err := s.NewGenerator()
			if err != nil {
				done <- err
				return
			}
			tick := time.NewTicker(dur / time.Duration(s.Samples()))
			defer tick.Stop()
			var buf []byte
			for g.Step() {
				<-tick.C
				for u := 0; u < g.Units(); u++ {
					buf, _ = g.AppendUnit(buf[:0], u)
					subj := sim.Subject("modewatch", g.UnitName(u))
					id := fmt.Sprintf("%s@%d", subj, g.Time().UnixNano())
					for deadline := time.Now().Add(30 * time.Second); ; {
						pctx, cancel := context.WithTimeout(ctx, 2*time.Second)
						_, err := js.Publish(pctx, subj, buf, jetstream.WithMsgID(id))
						cancel()
						if err == nil {
							break
						}
						if time.Now().After(deadline) {
							done <- fmt.Errorf("publish %s: %w", id, err)
							return
						}
						<-tick.C
					}
				}
			}
			done <- nil
		}()
		return done
	}
	want1 := part1.Samples() - 1 // frames per unit; the last stays pending
	wantAll := part1.Samples() + part2.Samples() - 1

	scores := &scoreLog{seen: map[string][]string{}}
	sub, _ := nc.Subscribe("modewatch.scores.>", scores.add)
	defer sub.Unsubscribe()
	waitScores := func(n int, what string) {
		start := time.Now()
		tick := time.NewTicker(50 * time.Millisecond)
		defer tick.Stop()
		for scores.distinct() < n {
			if time.Since(start) > 120*time.Second {
				scores.mu.Lock()
				per := map[string]int{}
				for k := range scores.seen {
					per[strings.Fields(k)[0]]++
				}
				scores.mu.Unlock()
				t.Fatalf("%s: %d distinct unit frames scored within 120 s, want %d; per unit %v; owners %v", what, scores.distinct(), n, per, owners(t, js, "mw"))
			}
			<-tick.C
		}
	}

	// stored returns every unit's frame counter in a group's stored
	// checkpoints (units without one are left out).
	stored := func(group string) map[string]string {
		out := map[string]string{}
		st, err := js.ObjectStore(ctx, group+"_checkpoints")
		if err != nil {
			return out
		}
		for _, u := range units {
			if ck, err := host.LoadCheckpoint(ctx, st, u); err == nil && ck != nil {
				out[u] = fmt.Sprintf("%d to %s", ck.Frames, ck.To.Format("15:04:05"))
			}
		}
		return out
	}
	// waitSame waits until the cluster's stored checkpoints count, for
	// every unit, the frames the uninterrupted instance's count, at least
	// n-1 each (about n frames per unit in the log; the last one or two
	// of each unit, by the timestamp jitter, wait in its aligner for a
	// later reading), unchanged over two polls a second apart (the
	// checkpoint interval).
	waitSame := func(n int, what string) {
		t.Helper()
		var a, b map[string]string
		prev := ""
		start := time.Now()
		tick := time.NewTicker(time.Second)
		defer tick.Stop()
		for {
			a, b = stored("ref"), stored("mw")
			ok := len(a) == len(units)
			for _, u := range units {
				var fa int
				fmt.Sscan(a[u], &fa)
				ok = ok && fa >= n-1 && a[u] == b[u]
			}
			now := fmt.Sprint(a, b)
			if ok && now == prev {
				return
			}
			prev = now
			if time.Since(start) > 120*time.Second {
				t.Fatalf("%s: within 120 s the stored frame counters are uninterrupted %v, cluster %v (the log has %d frames per unit); owners %v",
					what, a, b, n, owners(t, js, "mw"))
			}
			<-tick.C
		}
	}

	// One uninterrupted instance over the same stream, and three
	// instances sharing the units, before the readings flow.
	ref := startChild(t, dir, "solo", clusterConfig(urls[:2], "solo", "ref", modelPath, filepath.Join(dir, "solo"), units, ttl))
	// Three instances share the units before the readings flow.
	inst := map[string]*child{}
	for _, id := range []string{"x", "y", "z"} {
		inst[id] = startChild(t, dir, id, clusterConfig(urls, id, "mw", modelPath, filepath.Join(dir, id), units, ttl))
	}
	until(t, 60*time.Second, "4 units spread over the 3 instances", func() bool {
		o := owners(t, js, "mw")
		seen := map[string]bool{}
		for _, u := range units {
			seen[o[u]] = true
		}
		return len(o) == len(units) && len(seen) == 3 && !seen[""]
	})
	pub1 := publish(part1, 20*time.Second)
	waitScores(len(units)*want1/2, "before the kill")
	own := owners(t, js, "mw")
	victim := own[units[0]]
	inst[victim].cmd.Process.Signal(syscall.SIGKILL)
	inst[victim].cmd.Wait()
	took := until(t, 30*time.Second, "the killed instance's units owned by survivors", func() bool {
		o := owners(t, js, "mw")
		for _, u := range units {
			if o[u] == "" || o[u] == victim {
				return false
			}
		}
		return true
	})
	t.Logf("SIGKILL of %s (owners %v) at %d distinct unit frames; its units owned again after %v (lease TTL %v, bound 30 s)",
		victim, own, scores.distinct(), took.Round(100*time.Millisecond), ttl)

	// One NATS server goes away; the service goes on.
	waitScores(len(units)*want1*3/4, "before a NATS server stops")
	cl.Servers[2].Shutdown()
	t.Logf("NATS server s3 shut down at %d distinct frames", scores.distinct())
	if err := <-pub1; err != nil {
		t.Fatal(err)
	}
	waitSame(want1, "part 1 after a NATS server stopped")

	// A graceful stop while more readings arrive.
	var survivors []string
	for _, id := range []string{"x", "y", "z"} {
		if id != victim {
			survivors = append(survivors, id)
		}
	}
	pub2 := publish(part2, 10*time.Second)
	waitScores(len(units)*(want1+part2.Samples()/3), "part 2 before the graceful stop")
	leaving, staying := inst[survivors[0]], inst[survivors[1]]
	before := owners(t, js, "mw")
	t0 := time.Now()
	leaving.stop(t)
	handed := until(t, 30*time.Second, "the stopped instance's units owned by the last one", func() bool {
		o := owners(t, js, "mw")
		for _, u := range units {
			if o[u] != staying.name {
				return false
			}
		}
		return true
	})
	t.Logf("graceful stop of %s (owners %v): every unit on %s %v after the stop began, %v after it ended (lease TTL %v)",
		leaving.name, before, staying.name, time.Since(t0).Round(100*time.Millisecond), handed.Round(100*time.Millisecond), ttl)
	if handed >= ttl {
		t.Errorf("hand-over took %v after the stop, not shorter than the lease TTL %v", handed, ttl)
	}
	if err := <-pub2; err != nil {
		t.Fatal(err)
	}
	waitSame(wantAll, "all readings")
	staying.stop(t)
	ref.stop(t)

	// Score lines travel on core NATS: one published as a connection
	// drops may be lost, so they are only logged; the stored frame
	// counters are the check.
	t.Logf("distinct unit frames seen on the scores subject (both runs): %d; %d score lines in all", scores.distinct(), scores.total)

	// Stored checkpoints: each unit counted every frame once.
	for _, u := range units {
		stA, _ := js.ObjectStore(ctx, "ref_checkpoints")
		stB, _ := js.ObjectStore(ctx, "mw_checkpoints")
		a, errA := host.LoadCheckpoint(ctx, stA, u)
		b, errB := host.LoadCheckpoint(ctx, stB, u)
		if errA != nil || errB != nil || a == nil || b == nil {
			t.Fatalf("unit %s: checkpoints %v %v", u, errA, errB)
		}
		if a.Frames+1 < uint64(wantAll) || a.Frames != b.Frames || !a.To.Equal(b.To) {
			t.Errorf("unit %s: uninterrupted %d frames to %v, cluster %d to %v; the log has %d", u, a.Frames, a.To, b.Frames, b.To, wantAll)
		}
	}

	// The same incidents with the same final revisions.
	ra := lastRevisions(t, filepath.Join(dir, "solo", "alerts.jsonl"))
	rb := map[string]int{}
	for _, id := range []string{"x", "y", "z"} {
		path := filepath.Join(dir, id, "alerts.jsonl")
		if _, err := os.Stat(path); err != nil {
			continue
		}
		for rid, r := range lastRevisions(t, path) {
			rb[rid] = max(rb[rid], r.Revision)
		}
	}
	if len(ra) == 0 {
		t.Error("no alerts in the uninterrupted run: the comparison would prove nothing")
	}
	if len(ra) != len(rb) {
		t.Errorf("uninterrupted %d incidents, cluster %d", len(ra), len(rb))
	}
	for id, x := range ra {
		if rev, ok := rb[id]; !ok || rev != x.Revision {
			t.Errorf("incident %s: uninterrupted revision %d, cluster %d (present %v)", id, x.Revision, rev, ok)
		}
	}
	t.Logf("%d incidents in both runs", len(ra))
}

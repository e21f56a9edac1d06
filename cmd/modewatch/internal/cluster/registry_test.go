package cluster

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"

	"modewatch/stream/natsource/natstest"
)

// newRegistry starts a real embedded JetStream server and opens a registry
// with the given TTL on it; it returns the registry and a function that
// opens another registry (another instance's connection) on the same
// bucket.
func newRegistry(t *testing.T, ttl time.Duration) (*Registry, func() *Registry) {
	t.Helper()
	s := natstest.StartJetStream(t)
	open := func() *Registry {
		nc, err := nats.Connect(s.ClientURL())
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(nc.Close)
		js, err := jetstream.New(nc)
		if err != nil {
			t.Fatal(err)
		}
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		r, err := OpenRegistry(ctx, js, RegistryConfig{TTL: ttl})
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	return open(), open
}

// ctxT bounds a test's registry calls; a hang bound, longer than
// TestLeaseExpires's own deadline of 10 TTL.
func ctxT(t *testing.T) context.Context {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	t.Cleanup(cancel)
	return ctx
}

// TestLeaseCompareAndSet: a lease is taken once; the holder renews with
// its revision, a stale revision is refused as lost; a release lets
// another instance take the unit at once.
func TestLeaseCompareAndSet(t *testing.T) {
	a, open := newRegistry(t, time.Minute)
	b := open()
	ctx := ctxT(t)
	now := time.Date(2026, 3, 9, 6, 0, 0, 0, time.UTC)
	la, err := a.Acquire(ctx, "kiln", "a", now)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := b.Acquire(ctx, "kiln", "b", now); !errors.Is(err, ErrHeld) {
		t.Fatalf("second acquire: %v, want ErrHeld", err)
	}
	la2, err := a.Renew(ctx, la)
	if err != nil {
		t.Fatal(err)
	}
	if la2.Revision <= la.Revision {
		t.Errorf("renewal revision %d not after %d", la2.Revision, la.Revision)
	}
	if _, err := b.Renew(ctx, Lease{Unit: "kiln", Owner: "b", Revision: la.Revision}); !errors.Is(err, ErrLost) {
		t.Errorf("renew with a stale revision: %v, want ErrLost", err)
	}
	if err := b.Release(ctx, la); !errors.Is(err, ErrLost) {
		t.Errorf("release with a stale revision: %v, want ErrLost", err)
	}
	snap, err := b.Read(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if l := snap.Leases["kiln"]; l.Owner != "a" || l.Revision != la2.Revision || !l.Since.Equal(now) {
		t.Errorf("lease read back as %+v", l)
	}
	if err := a.Release(ctx, la2); err != nil {
		t.Fatal(err)
	}
	lb, err := b.Acquire(ctx, "kiln", "b", now)
	if err != nil {
		t.Fatalf("acquire after release: %v", err)
	}
	if _, err := a.Renew(ctx, la2); !errors.Is(err, ErrLost) {
		t.Errorf("old holder renews after hand-over: %v, want ErrLost", err)
	}
	// Unit names a key cannot hold are encoded, and read back by name.
	if _, err := a.Acquire(ctx, "boiler house/2", "a", now); err != nil {
		t.Fatal(err)
	}
	if err := a.Announce(ctx, Member{ID: "a", Started: now, Seen: now}); err != nil {
		t.Fatal(err)
	}
	snap, err = a.Read(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if snap.Leases["boiler house/2"].Owner != "a" || snap.Leases["kiln"].Revision != lb.Revision || snap.Members["a"].ID != "a" {
		t.Errorf("snapshot %+v", snap)
	}
	if err := a.Announce(ctx, Member{ID: "a.b"}); err == nil {
		t.Error("an instance id with a dot was accepted")
	}
}

// TestLeaseExpires: a lease not renewed disappears after the TTL (server
// side, no client clock), and another instance takes it; one renewed more
// often than the TTL stays with its holder. The TTL is 5 s, so that the
// renewals every TTL/4 keep the lease even when a loaded machine delays
// one by seconds.
func TestLeaseExpires(t *testing.T) {
	const ttl = 5 * time.Second
	a, open := newRegistry(t, ttl)
	b := open()
	ctx := ctxT(t)
	now := time.Now()
	kept, err := a.Acquire(ctx, "mill", "a", now)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := a.Acquire(ctx, "press", "a", now); err != nil {
		t.Fatal(err)
	}
	// Renew mill every ttl/4 while b tries to take both, until b has
	// press (left to expire) or the deadline passes.
	tick := time.NewTicker(ttl / 4)
	defer tick.Stop()
	deadline := time.After(10 * ttl)
	var gotPress bool
	start := time.Now()
	for !gotPress {
		select {
		case <-deadline:
			t.Fatal("the unrenewed lease did not expire within 10 TTL")
		case <-tick.C:
		}
		if kept, err = a.Renew(ctx, kept); err != nil {
			t.Fatalf("renewing mill: %v", err)
		}
		if _, err := b.Acquire(ctx, "mill", "b", time.Now()); !errors.Is(err, ErrHeld) {
			t.Fatalf("b took the renewed lease: %v", err)
		}
		if _, err := b.Acquire(ctx, "press", "b", time.Now()); err == nil {
			gotPress = true
		} else if !errors.Is(err, ErrHeld) {
			t.Fatal(err)
		}
	}
	if el := time.Since(start); el < ttl/2 {
		t.Errorf("press taken after %v, before its TTL of %v could have run out", el, ttl)
	}
}

// TestReadSkipsOversizeEntry: a value over MaxEntryBytes under an
// announcement key (written by something other than an instance into a
// bucket created without the size limit) is reported and skipped, and the
// well-formed entries beside it are still read.
func TestReadSkipsOversizeEntry(t *testing.T) {
	s := natstest.StartJetStream(t)
	js, err := jetstream.New(natstest.Connect(t, s))
	if err != nil {
		t.Fatal(err)
	}
	ctx := ctxT(t)
	// A bucket made beforehand without a value limit.
	kv, err := js.CreateKeyValue(ctx, jetstream.KeyValueConfig{Bucket: DefaultBucket, History: 1, TTL: time.Minute})
	if err != nil {
		t.Fatal(err)
	}
	r, err := OpenRegistry(ctx, js, RegistryConfig{TTL: time.Minute})
	if err != nil {
		t.Fatal(err)
	}
	now := time.Date(2026, 3, 9, 6, 0, 0, 0, time.UTC)
	if err := r.Announce(ctx, Member{ID: "a", Started: now, Seen: now}); err != nil {
		t.Fatal(err)
	}
	huge := `{"id":"x","http":"` + strings.Repeat("h", 2*MaxEntryBytes) + `"}`
	if _, err := kv.Put(ctx, memberPrefix+"x", []byte(huge)); err != nil {
		t.Fatal(err)
	}
	snap, err := r.Read(ctx)
	if err == nil || !strings.Contains(err.Error(), "instance.x") {
		t.Errorf("oversize entry: error %v, want one naming instance.x", err)
	}
	if _, ok := snap.Members["x"]; ok || snap.Members["a"].ID != "a" {
		t.Errorf("members %v: want a only", snap.Members)
	}
}

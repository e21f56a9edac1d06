package cluster

import (
	"context"
	"sync"
	"testing"
	"time"
)

// world records which instance scores each unit, and fails the test if two
// score one at the same time.
type world struct {
	t      *testing.T
	mu     sync.Mutex
	owner  map[string]string
	gains  map[string]int // per instance
	moves  int            // gains of a unit that had an owner before
	before map[string]bool
}

func newWorld(t *testing.T) *world {
	return &world{t: t, owner: map[string]string{}, gains: map[string]int{}, before: map[string]bool{}}
}

type fakeInst struct {
	w  *world
	id string
}

func (f fakeInst) Gain(_ context.Context, u string) error {
	f.w.mu.Lock()
	defer f.w.mu.Unlock()
	if o := f.w.owner[u]; o != "" {
		f.w.t.Errorf("%s gains unit %s still scored by %s", f.id, u, o)
	}
	f.w.owner[u] = f.id
	f.w.gains[f.id]++
	if f.w.before[u] {
		f.w.moves++
	}
	f.w.before[u] = true
	return nil
}

func (f fakeInst) Release(_ context.Context, u string) error { f.drop(u); return nil }
func (f fakeInst) Lose(u string)                             { f.drop(u) }
func (f fakeInst) drop(u string) {
	f.w.mu.Lock()
	defer f.w.mu.Unlock()
	if f.w.owner[u] != f.id {
		f.w.t.Errorf("%s gives up unit %s it does not score (owner %q)", f.id, u, f.w.owner[u])
	}
	f.w.owner[u] = ""
}

// killed forgets the units of an instance that died (it scores nothing).
func (w *world) killed(id string) {
	w.mu.Lock()
	defer w.mu.Unlock()
	for u, o := range w.owner {
		if o == id {
			w.owner[u] = ""
		}
	}
}

// moved reads the count of moves under the lock: the coordinators' goroutines
// write it in Gain while the test reads it.
func (w *world) moved() int {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.moves
}

func (w *world) snapshot() map[string]string {
	w.mu.Lock()
	defer w.mu.Unlock()
	out := map[string]string{}
	for u, o := range w.owner {
		out[u] = o
	}
	return out
}

// waitFor polls cond every 50 ms until it holds or the deadline passes.
func waitFor(t *testing.T, within time.Duration, what string, cond func() bool) {
	t.Helper()
	tick := time.NewTicker(50 * time.Millisecond)
	defer tick.Stop()
	end := time.After(within)
	for !cond() {
		select {
		case <-end:
			t.Fatalf("not within %v: %s", within, what)
		case <-tick.C:
		}
	}
}

type runningCoord struct {
	c      *Coordinator
	cancel context.CancelFunc
	done   chan struct{}
}

func startCoord(t *testing.T, reg *Registry, w *world, id string, units []string) *runningCoord {
	c, err := NewCoordinator(reg, CoordinatorConfig{Instance: id, Units: units}, fakeInst{w, id})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	rc := &runningCoord{c: c, cancel: cancel, done: make(chan struct{})}
	go func() { c.Run(ctx); close(rc.done) }()
	t.Cleanup(func() { cancel(); <-rc.done })
	return rc
}

// balanced reports whether every unit is scored and each of ids scores n.
func balanced(w *world, units []string, ids []string, n int) bool {
	s := w.snapshot()
	per := map[string]int{}
	for _, u := range units {
		if s[u] == "" {
			return false
		}
		per[s[u]]++
	}
	for _, id := range ids {
		if per[id] != n {
			return false
		}
	}
	return true
}

// TestCoordinatorFailover: three instances spread 12 units 4 each; when
// one dies (no hand-over, its leases expire) the two others take its units
// within 3 TTL, and no unit that was on a survivor moves. The TTL is 5 s:
// a survivor renews every TTL/3 within TTL/2 and gives its units up when
// it could not for 2/3 TTL, so with a TTL of a second a loaded machine
// could delay a survivor's round enough to move its units too.
func TestCoordinatorFailover(t *testing.T) {
	const ttl = 5 * time.Second
	reg, open := newRegistry(t, ttl)
	units := names("unit", 12)
	w := newWorld(t)
	ids := []string{"a", "b", "c"}
	cs := map[string]*runningCoord{"a": startCoord(t, reg, w, "a", units)}
	cs["b"] = startCoord(t, open(), w, "b", units)
	cs["c"] = startCoord(t, open(), w, "c", units)
	waitFor(t, time.Minute, "12 units spread 4 each", func() bool { return balanced(w, units, ids, 4) })
	before := w.snapshot()
	w.mu.Lock()
	w.moves = 0
	w.mu.Unlock()

	cs["c"].cancel() // dies: no release, no renewals
	<-cs["c"].done
	w.killed("c")
	died := time.Now()
	waitFor(t, 3*ttl+2*time.Second, "the dead instance's units taken", func() bool { return balanced(w, units, ids[:2], 6) })
	t.Logf("units of the dead instance watched again after %v (TTL %v)", time.Since(died).Round(10*time.Millisecond), ttl)
	after := w.snapshot()
	for u, o := range before {
		if o != "c" && after[u] != o {
			t.Errorf("unit %s moved from survivor %s to %s", u, o, after[u])
		}
	}
	if m := w.moved(); m != 4 {
		t.Errorf("%d units moved, want the dead instance's 4", m)
	}
	st := cs["a"].c.Status()
	if len(st.Units) != 12 || len(cs["a"].c.Owned()) != 6 {
		t.Errorf("status of a: %d units, %d owned", len(st.Units), len(cs["a"].c.Owned()))
	}
}

// TestCoordinatorHandOver: a graceful stop hands the units over at once:
// with a TTL of one minute, the others take them within half of it, which
// only the hand-over can explain; a joining instance gets its share, the
// fewest moves the balance allows.
func TestCoordinatorHandOver(t *testing.T) {
	const ttl = time.Minute
	reg, open := newRegistry(t, ttl)
	units := names("unit", 12)
	w := newWorld(t)
	a := startCoord(t, reg, w, "a", units)
	b := startCoord(t, open(), w, "b", units)
	waitFor(t, ttl/2, "12 units spread 6 each", func() bool { return balanced(w, units, []string{"a", "b"}, 6) })

	w.mu.Lock()
	w.moves = 0
	w.mu.Unlock()
	startCoord(t, open(), w, "c", units)
	waitFor(t, ttl/2, "a joining instance gets 4 units", func() bool { return balanced(w, units, []string{"a", "b", "c"}, 4) })
	if m := w.moved(); m != 4 {
		t.Errorf("%d units moved when c joined, want 4", m)
	}

	ctx, cancel := context.WithTimeout(context.Background(), ttl/2)
	defer cancel()
	if err := b.c.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	if err := b.c.Stop(ctx); err != nil { // idempotent
		t.Fatal(err)
	}
	waitFor(t, ttl/2, "b's units handed over before the TTL", func() bool { return balanced(w, units, []string{"a", "c"}, 6) })
	waitFor(t, ttl/2, "a's status shows a and c owning every unit", func() bool {
		st := a.c.Status()
		if len(st.Members) != 2 || len(st.Units) != 12 {
			return false
		}
		for _, u := range st.Units {
			if (u.Owner != "a" && u.Owner != "c") || u.Since.IsZero() || u.Mine != (u.Owner == "a") {
				return false
			}
		}
		return true
	})
}

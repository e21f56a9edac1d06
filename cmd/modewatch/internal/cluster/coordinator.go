package cluster

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"maps"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// Handler is what owning a unit means to the instance. The Coordinator
// calls it from one goroutine, never for two units at once.
type Handler interface {
	// Gain is called once the unit's lease is taken: restore the unit and
	// start scoring it. An error gives the lease back.
	Gain(ctx context.Context, unit string) error
	// Release is called before the lease is given back on purpose
	// (rebalance, graceful stop): stop scoring the unit and save its state
	// so the next owner resumes where it ends.
	Release(ctx context.Context, unit string) error
	// Lose is called when the lease was lost (expired, taken, or not
	// renewed in time): stop scoring the unit at once; its state may not
	// be saved, because another instance may already own it.
	Lose(unit string)
}

// CoordinatorConfig configures a Coordinator.
type CoordinatorConfig struct {
	// Instance is this instance's id (ValidID). Required.
	Instance string
	// HTTP is the base URL of this instance's API, announced to the others.
	HTTP string
	// Units are the units to spread (every instance must list the same).
	Units []string
	// Pins fixes units to instances (unit → instance id).
	Pins map[string]string
	// Every is how often leases are renewed and the plan is checked;
	// default TTL/3. Changes in the bucket (an instance joining, a lease
	// released) start a round at once.
	Every time.Duration
	Log   *slog.Logger
	// Now is the clock (tests); default time.Now.
	Now func() time.Time
}

// UnitState is a unit as one instance sees the cluster.
type UnitState struct {
	Unit  string    `json:"unit"`
	Owner string    `json:"owner,omitempty"` // "" while no lease is held
	Since time.Time `json:"since,omitzero"`  // when the owner took it
	Plan  string    `json:"plan,omitempty"`  // the owner the placement wants
	Mine  bool      `json:"mine"`
}

// Status is the cluster as this instance last read it.
type Status struct {
	Instance string      `json:"instance"`
	Members  []Member    `json:"instances"`
	Units    []UnitState `json:"units"`
	Read     time.Time   `json:"read,omitzero"`
}

// Coordinator keeps this instance's announcement and leases alive and
// takes, hands over and gives up units as the placement ([Plan]) says.
type Coordinator struct {
	reg *Registry
	cfg CoordinatorConfig
	h   Handler
	log *slog.Logger

	started time.Time
	lastOK  time.Time            // last round whose renewals all reached the server
	held    map[string]Lease     // the leases this instance holds
	failed  map[string]time.Time // units whose Gain failed, and when

	mu       sync.Mutex
	status   Status
	forfeits map[string]bool // units the handler could not keep running

	wake chan struct{}
	stop chan struct{}
	done chan struct{}
	once sync.Once
}

// NewCoordinator returns a coordinator; Run starts it.
func NewCoordinator(reg *Registry, cfg CoordinatorConfig, h Handler) (*Coordinator, error) {
	if !ValidID(cfg.Instance) {
		return nil, fmt.Errorf("cluster: instance id %q: only letters, digits, '_' and '-'", cfg.Instance)
	}
	if cfg.Every <= 0 {
		cfg.Every = reg.TTL() / 3
	}
	if cfg.Log == nil {
		cfg.Log = slog.New(slog.DiscardHandler)
	}
	if cfg.Now == nil {
		cfg.Now = time.Now
	}
	return &Coordinator{reg: reg, cfg: cfg, h: h, log: cfg.Log, held: map[string]Lease{}, failed: map[string]time.Time{},
		wake: make(chan struct{}, 1), stop: make(chan struct{}), done: make(chan struct{}),
		status: Status{Instance: cfg.Instance}}, nil
}

// Run announces the instance and coordinates until ctx ends or Stop is
// called. Round errors (server unreachable) are logged and retried; Run
// returns when it stops.
func (c *Coordinator) Run(ctx context.Context) {
	defer close(c.done)
	c.started = c.cfg.Now()
	c.lastOK = c.started
	wctx, cancel := context.WithCancel(ctx)
	var wg sync.WaitGroup
	wg.Go(func() { c.watch(wctx) })
	defer wg.Wait()
	defer cancel()
	t := time.NewTicker(c.cfg.Every)
	defer t.Stop()
	for {
		if err := c.round(ctx); err != nil {
			c.log.Warn("cluster round incomplete; retried", "err", err)
		}
		select {
		case <-ctx.Done():
			return
		case <-c.stop:
			return
		case <-t.C:
		case <-c.wake:
		}
	}
}

// watch wakes a round when an instance appears, a lease changes hands, or
// a lease or an announcement is deleted (a hand-over, a graceful stop).
// Renewals do not wake it (they would start rounds in a loop); expiries
// produce no event, the periodic round finds them.
func (c *Coordinator) watch(ctx context.Context) {
	seen := map[string]string{} // key → owner (leases), "x" (announcements)
	for ctx.Err() == nil {
		w, err := c.reg.KV().WatchAll(ctx)
		if err != nil {
			select {
			case <-ctx.Done():
				return
			case <-time.After(c.cfg.Every):
				continue
			}
		}
		stopped := make(chan struct{})
		go func() {
			select {
			case <-ctx.Done():
				_ = w.Stop() // closes Updates
			case <-stopped:
			}
		}()
		for e := range w.Updates() {
			if e == nil {
				continue
			}
			k := e.Key()
			put := e.Operation() == jetstream.KeyValuePut
			wake := !put
			switch {
			case strings.HasPrefix(k, memberPrefix):
				wake = wake || seen[k] == ""
				seen[k] = "x"
			case put:
				// A lease changing hands; its renewals do not wake.
				var l Lease
				if len(e.Value()) <= MaxEntryBytes && json.Unmarshal(e.Value(), &l) == nil {
					wake = seen[k] != l.Owner
					seen[k] = l.Owner
				}
			}
			if !put {
				delete(seen, k)
			}
			if wake {
				select {
				case c.wake <- struct{}{}:
				default:
				}
			}
		}
		close(stopped)
		_ = w.Stop()
	}
}

// Forfeit gives up unit's lease at the next round without calling the
// Handler: the handler stopped the unit on its own (it could not run it).
// Another instance, or this one after a pause, takes it.
func (c *Coordinator) Forfeit(unit string) {
	c.mu.Lock()
	if c.forfeits == nil {
		c.forfeits = map[string]bool{}
	}
	c.forfeits[unit] = true
	c.mu.Unlock()
	select {
	case c.wake <- struct{}{}:
	default:
	}
}

// Owned returns the units this instance holds, sorted.
func (c *Coordinator) Owned() []string {
	c.mu.Lock()
	defer c.mu.Unlock()
	var out []string
	for _, u := range c.status.Units {
		if u.Mine {
			out = append(out, u.Unit)
		}
	}
	return out
}

// Status returns the cluster as last read.
func (c *Coordinator) Status() Status {
	c.mu.Lock()
	defer c.mu.Unlock()
	s := c.status
	s.Members = slices.Clone(s.Members)
	s.Units = slices.Clone(s.Units)
	return s
}

// round renews, reads the bucket, and acts on the plan.
func (c *Coordinator) round(ctx context.Context) error {
	rctx, cancel := context.WithTimeout(ctx, c.reg.TTL()/2)
	defer cancel()
	now := c.cfg.Now()
	var errs []error
	c.mu.Lock()
	forfeits := c.forfeits
	c.forfeits = nil
	c.mu.Unlock()
	for u := range forfeits {
		if l, ok := c.held[u]; ok {
			if err := c.reg.Release(rctx, l); err != nil && !errors.Is(err, ErrLost) {
				errs = append(errs, err)
			}
			delete(c.held, u)
			c.failed[u] = now
		}
	}
	renewed := true
	for _, u := range slices.Sorted(maps.Keys(c.held)) {
		l, err := c.reg.Renew(rctx, c.held[u])
		switch {
		case err == nil:
			c.held[u] = l
		case errors.Is(err, ErrLost):
			c.log.Warn("unit lease lost; the unit is no longer scored here", "unit", u)
			delete(c.held, u)
			c.h.Lose(u)
		default:
			renewed = false
			errs = append(errs, err)
		}
	}
	if renewed {
		c.lastOK = now
	} else if now.Sub(c.lastOK) > c.reg.TTL()*2/3 {
		// The leases may expire before a renewal gets through: stop
		// scoring rather than risk two owners.
		for _, u := range slices.Sorted(maps.Keys(c.held)) {
			c.log.Error("unit lease not renewed in time; the unit is no longer scored here", "unit", u)
			delete(c.held, u)
			c.h.Lose(u)
		}
	}
	if err := c.reg.Announce(rctx, Member{ID: c.cfg.Instance, HTTP: c.cfg.HTTP, Started: c.started, Seen: now}); err != nil {
		return errors.Join(append(errs, err)...)
	}
	snap, err := c.reg.Read(rctx)
	if err != nil && len(snap.Members) == 0 {
		return errors.Join(append(errs, err)...)
	}
	errs = append(errs, err)
	current := map[string]string{}
	for u, l := range snap.Leases {
		current[u] = l.Owner
	}
	members := slices.Sorted(maps.Keys(snap.Members))
	if _, ok := snap.Members[c.cfg.Instance]; !ok {
		members = append(members, c.cfg.Instance)
	}
	plan := Plan(c.cfg.Units, members, current, c.cfg.Pins)

	// Give up the units the plan moves to another live instance.
	for _, u := range slices.Sorted(maps.Keys(c.held)) {
		to := plan[u]
		if to == c.cfg.Instance || to == "" {
			continue
		}
		c.log.Info("handing unit over", "unit", u, "to", to)
		if err := c.handOver(rctx, u); err != nil {
			// Kept (if not saved, the new owner would resume from an
			// older state).
			errs = append(errs, err)
		}
		if _, kept := c.held[u]; !kept {
			delete(snap.Leases, u)
		}
	}
	// Take the units the plan gives this instance and nobody holds.
	for _, u := range c.cfg.Units {
		if plan[u] != c.cfg.Instance {
			continue
		}
		if _, mine := c.held[u]; mine {
			continue
		}
		if l, ok := snap.Leases[u]; ok && l.Owner != c.cfg.Instance {
			continue // held by its old owner until released or expired
		}
		if t, ok := c.failed[u]; ok && now.Sub(t) < c.cfg.Every {
			continue // failed lately: not again before the next periodic round
		}
		l, err := c.reg.Acquire(rctx, u, c.cfg.Instance, c.cfg.Now())
		if err != nil {
			if !errors.Is(err, ErrHeld) {
				errs = append(errs, err)
			}
			continue
		}
		if err := c.h.Gain(rctx, u); err != nil {
			c.failed[u] = now
			errs = append(errs, fmt.Errorf("cluster: take %s: %w", u, err))
			if rerr := c.reg.Release(rctx, l); rerr != nil && !errors.Is(rerr, ErrLost) {
				errs = append(errs, rerr)
			}
			continue
		}
		delete(c.failed, u)
		c.log.Info("unit taken", "unit", u)
		c.held[u] = l
		snap.Leases[u] = l
	}
	c.publish(snap, plan, now)
	return errors.Join(errs...)
}

func (c *Coordinator) publish(snap Snapshot, plan map[string]string, now time.Time) {
	st := Status{Instance: c.cfg.Instance, Read: now}
	for _, id := range slices.Sorted(maps.Keys(snap.Members)) {
		st.Members = append(st.Members, snap.Members[id])
	}
	for _, u := range slices.Sorted(slices.Values(c.cfg.Units)) {
		us := UnitState{Unit: u, Plan: plan[u]}
		if l, ok := c.held[u]; ok {
			us.Owner, us.Since, us.Mine = l.Owner, l.Since, true
		} else if l, ok := snap.Leases[u]; ok {
			us.Owner, us.Since = l.Owner, l.Since
		}
		st.Units = append(st.Units, us)
	}
	c.mu.Lock()
	c.status = st
	c.mu.Unlock()
}

// Stop ends Run and hands every held unit over gracefully: Release, then
// the lease is deleted so another instance takes the unit without waiting
// for the TTL (the announcement is withdrawn first). It is idempotent and
// must not be called before Run has started.
func (c *Coordinator) Stop(ctx context.Context) error {
	var errs []error
	c.once.Do(func() {
		close(c.stop)
		select {
		case <-c.done:
		case <-ctx.Done():
			errs = append(errs, ctx.Err())
			return
		}
		// Withdraw first, so that the others' plans no longer count this
		// instance when its leases go.
		if err := c.reg.Withdraw(ctx, c.cfg.Instance); err != nil {
			errs = append(errs, err)
		}
		for _, u := range slices.Sorted(maps.Keys(c.held)) {
			// A unit not saved keeps its lease until it expires; the next
			// owner resumes from the last stored state.
			errs = append(errs, c.handOver(ctx, u))
		}
	})
	return errors.Join(errs...)
}

// handOver lets the handler save unit and then deletes its lease. If the
// handler fails the lease is kept and the error returned.
func (c *Coordinator) handOver(ctx context.Context, u string) error {
	if err := c.h.Release(ctx, u); err != nil {
		return fmt.Errorf("cluster: hand over %s: %w", u, err)
	}
	l := c.held[u]
	delete(c.held, u)
	if err := c.reg.Release(ctx, l); err != nil && !errors.Is(err, ErrLost) {
		return err
	}
	return nil
}

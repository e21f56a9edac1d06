package cluster

import (
	"context"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"regexp"
	"strings"
	"time"

	"github.com/nats-io/nats.go/jetstream"
)

// Errors of the Registry.
var (
	// ErrHeld reports a lease another instance (or this one) holds.
	ErrHeld = errors.New("cluster: unit lease is held")
	// ErrLost reports a lease that expired or was taken since it was read:
	// the caller no longer owns the unit.
	ErrLost = errors.New("cluster: unit lease lost")
)

// DefaultBucket is the key-value bucket of the leases when none is
// configured.
const DefaultBucket = "modewatch_cluster"

// RegistryConfig configures a Registry.
type RegistryConfig struct {
	// Bucket is the key-value bucket; default DefaultBucket. Created when
	// missing; an existing bucket's TTL and replicas are updated.
	Bucket string
	// TTL is how long an instance announcement or a unit lease lives
	// without renewal. Required.
	TTL time.Duration
	// Replicas of the bucket's stream (1 … 5; 3 on a 3-server cluster
	// survives the loss of one server). Default 1.
	Replicas int
}

// Member is an instance's announcement.
type Member struct {
	ID      string    `json:"id"`
	HTTP    string    `json:"http,omitempty"` // base URL of its HTTP API, if any
	Started time.Time `json:"started"`
	Seen    time.Time `json:"seen"` // time of the announcement (the instance's clock)
}

// Lease is a unit's lease as stored in the bucket.
type Lease struct {
	Unit  string    `json:"unit"`
	Owner string    `json:"owner"`
	Since time.Time `json:"since"` // when Owner took the unit (its clock)
	// Revision is the key's revision when read or written; a renewal or
	// release must name it (compare-and-set).
	Revision uint64 `json:"-"`
}

// Registry reads and writes announcements and leases in a JetStream
// key-value bucket whose entries expire TTL after they were last written.
// Its methods are safe for concurrent use.
type Registry struct {
	kv  jetstream.KeyValue
	js  jetstream.JetStream
	ttl time.Duration
}

// OpenRegistry binds to the bucket, creating it when missing (an
// existing bucket is used as it is: its TTL must be the lease TTL every
// instance uses). Instances starting together race to create it; the
// losers bind to the winner's. Each attempt is bounded by 5 s, all of
// them by ctx.
func OpenRegistry(ctx context.Context, js jetstream.JetStream, cfg RegistryConfig) (*Registry, error) {
	if cfg.TTL <= 0 {
		return nil, errors.New("cluster: lease TTL must be positive")
	}
	if cfg.Bucket == "" {
		cfg.Bucket = DefaultBucket
	}
	if cfg.Replicas == 0 {
		cfg.Replicas = 1
	}
	kv, err := Retry(ctx, func(ctx context.Context) (jetstream.KeyValue, error) {
		kv, err := js.KeyValue(ctx, cfg.Bucket)
		if errors.Is(err, jetstream.ErrBucketNotFound) {
			kv, err = js.CreateKeyValue(ctx, jetstream.KeyValueConfig{
				Bucket: cfg.Bucket, Description: "modewatch instances and unit leases",
				History: 1, TTL: cfg.TTL, Replicas: cfg.Replicas, Storage: jetstream.FileStorage,
				MaxValueSize: MaxEntryBytes,
			})
		}
		return kv, err
	})
	if err != nil {
		return nil, fmt.Errorf("cluster: bucket %s: %w", cfg.Bucket, err)
	}
	st, err := kv.Status(ctx)
	if err == nil && st.TTL() != cfg.TTL {
		return nil, fmt.Errorf("cluster: bucket %s has a TTL of %v, this instance's lease TTL is %v: every instance must use the same", cfg.Bucket, st.TTL(), cfg.TTL)
	}
	return &Registry{kv: kv, js: js, ttl: cfg.TTL}, nil
}

// Retry calls f with a context bounded by 5 s until it succeeds or ctx
// ends, waiting 200 ms between attempts; it returns the last error. A
// cluster still electing leaders, or two instances creating the same
// bucket at once, fail an attempt or two.
func Retry[T any](ctx context.Context, f func(context.Context) (T, error)) (T, error) {
	for {
		actx, cancel := context.WithTimeout(ctx, 5*time.Second)
		v, err := f(actx)
		cancel()
		if err == nil {
			return v, nil
		}
		select {
		case <-ctx.Done():
			return v, err
		case <-time.After(200 * time.Millisecond):
		}
	}
}

// TTL returns the lifetime of an entry without renewal.
func (r *Registry) TTL() time.Duration { return r.ttl }

// KV returns the bucket (for watching changes).
func (r *Registry) KV() jetstream.KeyValue { return r.kv }

// MaxEntryBytes bounds an announcement or lease value. Ours are a few
// hundred bytes; a longer value (a corrupt or foreign entry) is refused by
// the bucket when this instance creates it, and skipped and reported
// before it is decoded when read.
const MaxEntryBytes = 16 << 10

const (
	memberPrefix = "instance."
	leasePrefix  = "unit."
	leaseB64     = "unit64." // unit names with characters a key cannot hold
)

var plainKey = regexp.MustCompile(`^[A-Za-z0-9_-]+$`)

// ValidID reports whether id can name an instance: letters, digits, '_'
// and '-' (it is part of a key).
func ValidID(id string) bool { return plainKey.MatchString(id) }

func leaseKey(unit string) string {
	if plainKey.MatchString(unit) {
		return leasePrefix + unit
	}
	return leaseB64 + base64.RawURLEncoding.EncodeToString([]byte(unit))
}

// Announce writes (or refreshes) an instance's announcement.
func (r *Registry) Announce(ctx context.Context, m Member) error {
	if !ValidID(m.ID) {
		return fmt.Errorf("cluster: instance id %q: only letters, digits, '_' and '-'", m.ID)
	}
	b, err := json.Marshal(m)
	if err != nil {
		return err
	}
	if _, err := r.kv.Put(ctx, memberPrefix+m.ID, b); err != nil {
		return fmt.Errorf("cluster: announce %s: %w", m.ID, err)
	}
	return nil
}

// Withdraw removes an instance's announcement (graceful stop).
func (r *Registry) Withdraw(ctx context.Context, id string) error {
	if err := r.kv.Delete(ctx, memberPrefix+id); err != nil {
		return fmt.Errorf("cluster: withdraw %s: %w", id, err)
	}
	return nil
}

// Snapshot is the content of the bucket at one moment.
type Snapshot struct {
	Members map[string]Member // by instance id
	Leases  map[string]Lease  // by unit
}

// Read returns every live announcement and lease. Entries that do not
// decode are skipped and reported in the error, which does not stop the
// read.
//
// The keys are listed from the bucket's stream (its subjects at the moment
// of the call) and each is then read at its latest revision. A key watch
// is not used here: while other instances renew their entries (a new
// revision replaces the old one, the bucket keeps one), a watch can report
// that all initial values are delivered before it has delivered the new
// revision of a key whose old one it skipped, and such a snapshot misses
// a live instance or lease; plans made from it move units needlessly.
func (r *Registry) Read(ctx context.Context) (Snapshot, error) {
	s := Snapshot{Members: map[string]Member{}, Leases: map[string]Lease{}}
	prefix := "$KV." + r.kv.Bucket() + "."
	st, err := r.js.Stream(ctx, "KV_"+r.kv.Bucket())
	if err != nil {
		return s, fmt.Errorf("cluster: read: %w", err)
	}
	info, err := st.Info(ctx, jetstream.WithSubjectFilter(prefix+">"))
	if err != nil {
		return s, fmt.Errorf("cluster: read: %w", err)
	}
	var bad []error
	for subj := range info.State.Subjects {
		k := strings.TrimPrefix(subj, prefix)
		isMember := strings.HasPrefix(k, memberPrefix)
		if !isMember && !strings.HasPrefix(k, leasePrefix) && !strings.HasPrefix(k, leaseB64) {
			continue
		}
		e, err := r.kv.Get(ctx, k)
		if errors.Is(err, jetstream.ErrKeyNotFound) || errors.Is(err, jetstream.ErrKeyDeleted) {
			continue // deleted or expired since the listing
		}
		if err != nil {
			return s, fmt.Errorf("cluster: read %s: %w", k, err)
		}
		if n := len(e.Value()); n > MaxEntryBytes {
			bad = append(bad, fmt.Errorf("cluster: %s: value of %d bytes is over %d", k, n, MaxEntryBytes))
			continue
		}
		if isMember {
			var m Member
			if err := json.Unmarshal(e.Value(), &m); err != nil {
				bad = append(bad, fmt.Errorf("cluster: %s: %w", k, err))
				continue
			}
			s.Members[m.ID] = m
			continue
		}
		var l Lease
		if err := json.Unmarshal(e.Value(), &l); err != nil {
			bad = append(bad, fmt.Errorf("cluster: %s: %w", k, err))
			continue
		}
		l.Revision = e.Revision()
		s.Leases[l.Unit] = l
	}
	return s, errors.Join(bad...)
}

// Acquire takes the lease of unit for owner if nobody holds it (create,
// which succeeds only when the key is absent, deleted or expired). It
// returns ErrHeld if the lease exists.
func (r *Registry) Acquire(ctx context.Context, unit, owner string, now time.Time) (Lease, error) {
	l := Lease{Unit: unit, Owner: owner, Since: now.UTC()}
	b, err := json.Marshal(l)
	if err != nil {
		return l, err
	}
	rev, err := r.kv.Create(ctx, leaseKey(unit), b)
	if err != nil {
		if errors.Is(err, jetstream.ErrKeyExists) || errors.Is(err, jetstream.ErrKeyRevisionMismatch) {
			return l, fmt.Errorf("%w: %s", ErrHeld, unit)
		}
		return l, fmt.Errorf("cluster: acquire %s: %w", unit, err)
	}
	l.Revision = rev
	return l, nil
}

// Renew rewrites a held lease, restarting its TTL, if its revision is
// still l.Revision (compare-and-set). It returns the lease with its new
// revision, or ErrLost if the lease expired or changed hands.
func (r *Registry) Renew(ctx context.Context, l Lease) (Lease, error) {
	b, err := json.Marshal(l)
	if err != nil {
		return l, err
	}
	rev, err := r.kv.Update(ctx, leaseKey(l.Unit), b, l.Revision)
	if err != nil {
		if errors.Is(err, jetstream.ErrKeyRevisionMismatch) || errors.Is(err, jetstream.ErrKeyExists) ||
			errors.Is(err, jetstream.ErrKeyNotFound) {
			return l, fmt.Errorf("%w: %s", ErrLost, l.Unit)
		}
		return l, fmt.Errorf("cluster: renew %s: %w", l.Unit, err)
	}
	l.Revision = rev
	return l, nil
}

// Release deletes a held lease if its revision is still l.Revision, so
// that another instance can take the unit at once. ErrLost means it had
// already expired or changed hands.
func (r *Registry) Release(ctx context.Context, l Lease) error {
	err := r.kv.Delete(ctx, leaseKey(l.Unit), jetstream.LastRevision(l.Revision))
	if err != nil {
		if errors.Is(err, jetstream.ErrKeyRevisionMismatch) || errors.Is(err, jetstream.ErrKeyExists) ||
			errors.Is(err, jetstream.ErrKeyNotFound) {
			return fmt.Errorf("%w: %s", ErrLost, l.Unit)
		}
		return fmt.Errorf("cluster: release %s: %w", l.Unit, err)
	}
	return nil
}

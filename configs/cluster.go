package configs

import (
	"fmt"
	"maps"
	"regexp"
	"slices"
	"strings"
	"time"
)

// Defaults of the cluster section.
const (
	// DefaultLeaseTTL is how long a unit lease or an instance announcement
	// lives without renewal. Owners renew every third of it, so a dead
	// instance's units are taken over within about 1⅓ TTL plus the time to
	// restore them (under 30 s with the default).
	DefaultLeaseTTL = 10 * time.Second
	// DefaultClusterBucket is the key-value bucket of announcements and
	// leases; DefaultClusterStore the object store of unit checkpoints.
	DefaultClusterBucket = "modewatch_cluster"
	DefaultClusterStore  = "modewatch_checkpoints"
	// UnitPlaceholder stands for the unit's name in Cluster.UnitSubject.
	UnitPlaceholder = "{unit}"
)

// Cluster spreads the units over several instances that share a NATS
// cluster with JetStream. It is on when Instance is set.
type Cluster struct {
	// Instance is this instance's id, unique in the cluster: letters,
	// digits, '_' and '-'. Setting it turns clustering on.
	Instance string `yaml:"instance"`
	// Units are the units to spread; default the names listed in units.
	// Every instance must list the same.
	Units []string `yaml:"units"`
	// UnitSubject is the subject carrying one unit's readings, with
	// {unit} for its name; default "<server.prefix>.readings.{unit}". The
	// owner of a unit reads it through a durable consumer on
	// intake.jetstream.stream filtered to this subject.
	UnitSubject string `yaml:"unit_subject"`
	// Bucket is the key-value bucket of announcements and leases; Store
	// the object store of unit checkpoints.
	Bucket string `yaml:"bucket"`
	Store  string `yaml:"store"`
	// LeaseTTL: see DefaultLeaseTTL.
	LeaseTTL time.Duration `yaml:"lease_ttl"`
	// Replicas of the bucket and the store (1 … 5); default 1. Use 3 on a
	// cluster of three or more servers so that losing one loses nothing.
	Replicas int `yaml:"replicas"`
	// Pins fixes units to instances: unit name → instance id. A pinned
	// unit moves only while its instance is down.
	Pins map[string]string `yaml:"pins"`
}

// Enabled reports whether clustering is on.
func (c Cluster) Enabled() bool { return c.Instance != "" }

// Subject returns the subject of unit's readings.
func (c Cluster) Subject(unit string) string {
	return strings.ReplaceAll(c.UnitSubject, UnitPlaceholder, unit)
}

// applyClusterDefaults fills the cluster section's defaults when it is on.
func (c *Config) applyClusterDefaults() {
	k := &c.Cluster
	if !k.Enabled() {
		return
	}
	if len(k.Units) == 0 {
		for _, u := range c.Units {
			k.Units = append(k.Units, u.Name)
		}
	}
	if k.UnitSubject == "" {
		k.UnitSubject = c.Server.Prefix + ".readings." + UnitPlaceholder
	}
	if k.Bucket == "" {
		k.Bucket = DefaultClusterBucket
	}
	if k.Store == "" {
		k.Store = DefaultClusterStore
	}
	if k.LeaseTTL == 0 {
		k.LeaseTTL = DefaultLeaseTTL
	}
	if k.Replicas == 0 {
		k.Replicas = 1
	}
}

var clusterID = regexp.MustCompile(`^[A-Za-z0-9_-]+$`)

func (c *Config) validateCluster(v *validator) {
	k := c.Cluster
	if !k.Enabled() {
		if k.UnitSubject != "" || len(k.Units) > 0 || len(k.Pins) > 0 {
			v.add("cluster.instance", "required to turn clustering on (the other cluster keys are set)")
		}
		return
	}
	if !clusterID.MatchString(k.Instance) {
		v.add("cluster.instance", "%q: only letters, digits, '_' and '-'", k.Instance)
	}
	if len(c.Server.URLs) == 0 {
		v.add("server.urls", "required with cluster: every instance connects to the same NATS cluster (the embedded server is per instance)")
	}
	if c.Intake.JetStream.Stream == "" {
		v.add("intake.jetstream.stream", "required with cluster: each unit's owner reads its readings through a durable consumer")
	}
	if len(k.Units) == 0 {
		v.add("cluster.units", "no units to spread: list them here or in units")
	}
	seen := map[string]bool{}
	for i, u := range k.Units {
		p := fmt.Sprintf("cluster.units[%d]", i)
		switch {
		case seen[u]:
			v.add(p, "unit %q listed twice", u)
		case !validToken(u):
			v.add(p, "unit %q cannot be a subject token", u)
		}
		seen[u] = true
	}
	if !strings.Contains(k.UnitSubject, UnitPlaceholder) {
		v.add("cluster.unit_subject", "%q does not contain %s", k.UnitSubject, UnitPlaceholder)
	} else if !validSubject(k.Subject("x")) || strings.ContainsAny(k.Subject("x"), "*>") {
		v.add("cluster.unit_subject", "%q is not a subject without wildcards", k.UnitSubject)
	}
	for _, x := range []struct{ path, name string }{{"cluster.bucket", k.Bucket}, {"cluster.store", k.Store}} {
		if !clusterID.MatchString(x.name) {
			v.add(x.path, "%q: only letters, digits, '_' and '-'", x.name)
		}
	}
	if k.LeaseTTL < time.Second {
		v.add("cluster.lease_ttl", "%v is too short (at least 1s)", k.LeaseTTL)
	}
	if k.Replicas < 1 || k.Replicas > 5 {
		v.add("cluster.replicas", "%d is not in 1..5", k.Replicas)
	}
	for _, u := range slices.Sorted(maps.Keys(k.Pins)) {
		p := "cluster.pins." + u
		if !seen[u] {
			v.add(p, "unit %q is not one of the cluster's units", u)
		}
		if !clusterID.MatchString(k.Pins[u]) {
			v.add(p, "instance %q: only letters, digits, '_' and '-'", k.Pins[u])
		}
	}
}

package configs

import (
	"strings"
	"testing"
)

// TestClusterValidate: a cluster section is checked as a whole, every
// problem reported with its key; defaults fill the rest.
func TestClusterValidate(t *testing.T) {
	const base = "server: {urls: [nats://a:4222]}\nintake: {jetstream: {stream: R}}\nunits: [{name: kiln}, {name: mill}]\n"
	ok, err := Parse("ok.yaml", []byte(base+"cluster: {instance: hall-a, pins: {kiln: hall-b}}\n"))
	if err != nil {
		t.Fatal(err)
	}
	k := ok.Cluster
	if !k.Enabled() || strings.Join(k.Units, ",") != "kiln,mill" || k.LeaseTTL != DefaultLeaseTTL ||
		k.Bucket != DefaultClusterBucket || k.Store != DefaultClusterStore || k.Replicas != 1 ||
		k.Subject("kiln") != "modewatch.readings.kiln" {
		t.Errorf("defaults: %+v", k)
	}
	if off, _ := Parse("off.yaml", nil); off.Cluster.Enabled() || off.Cluster.LeaseTTL != 0 {
		t.Errorf("cluster on without an instance: %+v", off.Cluster)
	}
	cases := []struct{ name, yaml, want string }{
		{"no instance", "cluster: {units: [a]}", "cluster.instance: required"},
		{"bad instance", base + "cluster: {instance: hall.a}", "cluster.instance"},
		{"no server", "intake: {jetstream: {stream: R}}\ncluster: {instance: a, units: [u]}", "server.urls: required"},
		{"no stream", "server: {urls: [nats://a:4222]}\ncluster: {instance: a, units: [u]}", "intake.jetstream.stream: required"},
		{"no units", "server: {urls: [nats://a:4222]}\nintake: {jetstream: {stream: R}}\ncluster: {instance: a}", "cluster.units: no units"},
		{"twice", base + "cluster: {instance: a, units: [u, u]}", "listed twice"},
		{"subject", base + "cluster: {instance: a, unit_subject: plant.readings}", "does not contain {unit}"},
		{"wildcard", base + `cluster: {instance: a, unit_subject: "plant.*.{unit}"}`, "without wildcards"},
		{"ttl", base + "cluster: {instance: a, lease_ttl: 100ms}", "too short"},
		{"replicas", base + "cluster: {instance: a, replicas: 7}", "not in 1..5"},
		{"pin unit", base + "cluster: {instance: a, pins: {boiler: a}}", "cluster.pins.boiler"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse("x.yaml", []byte(tc.yaml))
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("got %v, want an error containing %q", err, tc.want)
			}
		})
	}
}

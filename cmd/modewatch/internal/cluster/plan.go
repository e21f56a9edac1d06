// Package cluster spreads a site's plant units over several modewatch
// instances that share a NATS cluster with JetStream. It holds two parts
// that know nothing of each other:
//
//   - the placement ([Plan]): which live instance should watch each unit,
//     by rendezvous hashing with a load bound, moving as few units as
//     possible when instances join or leave; pure code, no I/O.
//   - the leases ([Registry], [Coordinator]): instances announce themselves
//     and hold one lease per unit in a JetStream key-value bucket whose
//     entries expire after a TTL unless renewed; a lease is taken by
//     compare-and-set on the key's revision, so at most one instance holds
//     a unit at a time.
//
// The service decides what owning a unit means (scoring it, restoring and
// saving its checkpoint) through the [Handler] it gives the Coordinator.
package cluster

import (
	"hash/fnv"
	"slices"
	"sort"
)

// Weight is the rendezvous weight of unit on instance (Thaler &
// Ravishankar, "Using name-based mappings to increase hit rates",
// IEEE/ACM Transactions on Networking 6(1), 1998): a hash of the pair, the
// same on every instance. A unit prefers the instances in decreasing order
// of weight.
//
//	w(u, i) = mix(FNV-1a-64(u ‖ 0x00 ‖ i))
//
// mix is the splitmix64 finaliser (Steele, Lea & Flood, OOPSLA 2014), which
// spreads FNV's weak low bits over the whole word.
func Weight(unit, instance string) uint64 {
	h := fnv.New64a()
	h.Write([]byte(unit))
	h.Write([]byte{0})
	h.Write([]byte(instance))
	x := h.Sum64()
	x ^= x >> 30
	x *= 0xbf58476d1ce4e5b9
	x ^= x >> 27
	x *= 0x94d049bb133111eb
	x ^= x >> 31
	return x
}

// Rank returns instances in unit's order of preference (decreasing
// [Weight]; ties, practically impossible, by name).
func Rank(unit string, instances []string) []string {
	out := slices.Clone(instances)
	sortByWeight(out, unit)
	return out
}

func sortByWeight(inst []string, unit string) {
	sort.Slice(inst, func(a, b int) bool {
		wa, wb := Weight(unit, inst[a]), Weight(unit, inst[b])
		if wa != wb {
			return wa > wb
		}
		return inst[a] < inst[b]
	})
}

// Plan returns the owner each unit should have, by unit name, given the
// live instances, the current owners (unit → instance, from the leases;
// owners not live are ignored) and the pins (unit → instance, from the
// configuration).
//
// The rules, in order:
//  1. A pinned unit goes to its pinned instance when that is live (a pin to
//     an instance that is down is ignored, so the unit is still watched).
//  2. Every instance has a quota: with N units over M instances, q = ⌊N/M⌋
//     and r = N mod M instances may hold q+1 (pinned units count, and an
//     instance may exceed its quota by its pins alone).
//  3. A unit stays with its live current owner while that owner is within
//     its quota; an owner over quota keeps the units it ranks highest by
//     [Weight] and lets the rest go.
//  4. Every unit not placed by 1–3 goes, in order of name, to the instance
//     it ranks highest (rendezvous hashing) that is still under q, or else
//     under q+1 while fewer than r instances hold q+1; failing both (pins
//     crowd the quotas) to its highest-ranked instance with the fewest
//     units.
//
// So each instance ends with q or q+1 units when there are no pins; when an
// instance leaves, only its units move, and when one joins, only the units
// the quotas force out of the others move (to it), the fewest the balance
// allows. Plan is deterministic: every instance computes the same result
// from the same inputs. With no live instance it returns an empty map.
func Plan(units, instances []string, current, pins map[string]string) map[string]string {
	out := make(map[string]string, len(units))
	if len(instances) == 0 {
		return out
	}
	live := make(map[string]bool, len(instances))
	for _, i := range instances {
		live[i] = true
	}
	insts := slices.Clone(instances)
	slices.Sort(insts)
	insts = slices.Compact(insts)
	us := slices.Clone(units)
	slices.Sort(us)
	us = slices.Compact(us)
	n, m := len(us), len(insts)
	q, r := n/m, n%m
	load := make(map[string]int, m)

	// 1. Pins.
	for _, u := range us {
		if p, ok := pins[u]; ok && live[p] {
			out[u] = p
			load[p]++
		}
	}
	// 3. Current owners within quota, best-ranked units first.
	held := map[string][]string{}
	for _, u := range us {
		if _, done := out[u]; done {
			continue
		}
		if o, ok := current[u]; ok && live[o] {
			held[o] = append(held[o], u)
		}
	}
	atTop := 0 // instances holding q+1 or more
	for _, o := range insts {
		hs := held[o]
		sort.Slice(hs, func(a, b int) bool {
			wa, wb := Weight(hs[a], o), Weight(hs[b], o)
			if wa != wb {
				return wa > wb
			}
			return hs[a] < hs[b]
		})
		keep := max(q-load[o], 0)
		if atTop < r && load[o]+len(hs) > q {
			keep = max(q+1-load[o], 0)
		}
		for _, u := range hs[:min(keep, len(hs))] {
			out[u] = o
			load[o]++
		}
		if load[o] > q {
			atTop++
		}
	}
	// 4. The rest by rendezvous rank under the quotas.
	for _, u := range us {
		if _, done := out[u]; done {
			continue
		}
		rank := Rank(u, insts)
		pick := ""
		for _, i := range rank {
			if load[i] < q {
				pick = i
				break
			}
		}
		if pick == "" && atTop < r {
			for _, i := range rank {
				if load[i] < q+1 {
					pick = i
					atTop++
					break
				}
			}
		}
		if pick == "" {
			pick = rank[0]
			for _, i := range rank {
				if load[i] < load[pick] {
					pick = i
				}
			}
		}
		out[u] = pick
		load[pick]++
	}
	return out
}

package alerts

import (
	"fmt"
	"math/rand/v2"
	"reflect"
	"testing"
	"time"
)

// fillRandom sets every exported field reachable from v (a settable
// value) to a random non-zero value, but bools, which are random: one
// element in each slice and map, a new value behind each pointer.
func fillRandom(v reflect.Value, rng *rand.Rand) {
	switch v.Kind() {
	case reflect.String:
		v.SetString(fmt.Sprintf("s%d", rng.Uint32()))
	case reflect.Bool:
		v.SetBool(rng.IntN(2) == 0)
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64:
		v.SetInt(1 + rng.Int64N(1000))
	case reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		v.SetUint(1 + rng.Uint64N(1000))
	case reflect.Float32, reflect.Float64:
		v.SetFloat(1 + rng.Float64())
	case reflect.Pointer:
		v.Set(reflect.New(v.Type().Elem()))
		fillRandom(v.Elem(), rng)
	case reflect.Slice:
		v.Set(reflect.MakeSlice(v.Type(), 1, 1))
		fillRandom(v.Index(0), rng)
	case reflect.Array:
		for i := range v.Len() {
			fillRandom(v.Index(i), rng)
		}
	case reflect.Map:
		v.Set(reflect.MakeMap(v.Type()))
		k, e := reflect.New(v.Type().Key()).Elem(), reflect.New(v.Type().Elem()).Elem()
		fillRandom(k, rng)
		fillRandom(e, rng)
		v.SetMapIndex(k, e)
	case reflect.Struct:
		if v.Type() == reflect.TypeFor[time.Time]() {
			v.Set(reflect.ValueOf(time.Unix(1+rng.Int64N(1e9), 0).UTC()))
			return
		}
		for i := range v.NumField() {
			if v.Type().Field(i).IsExported() {
				fillRandom(v.Field(i), rng)
			}
		}
	default:
		panic("fillRandom: no filler for " + v.Type().String())
	}
}

// TestSnapIncidentRoundTrip: every field of an incident's snapshot, set to
// a random value, comes back from restoring the incident and taking its
// snapshot again, so a field saved but not restored (or restored into the
// wrong field) is caught. The group and the flood are references resolved
// by name when the units are attached (TestSnapshotRestore runs them).
func TestSnapIncidentRoundTrip(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 12))
	for run := range 16 {
		var si snapIncident
		fillRandom(reflect.ValueOf(&si).Elem(), rng)
		si.Group, si.Flood = "", ""
		si.Location.Settle %= holdSettle + 1 // within the range a restore accepts
		incs, err := buildIncidents(&snapshot{Incidents: []snapIncident{si}})
		if err != nil {
			t.Fatal(err)
		}
		back := snapIncidentOf(incs[si.ID])
		if !reflect.DeepEqual(back, si) {
			g, w := reflect.ValueOf(back), reflect.ValueOf(si)
			for i := range g.NumField() {
				if !reflect.DeepEqual(g.Field(i).Interface(), w.Field(i).Interface()) {
					t.Errorf("run %d: %s: saved %+v, restored and saved again %+v", run, g.Type().Field(i).Name, w.Field(i).Interface(), g.Field(i).Interface())
				}
			}
		}
	}
}

package alerts

import (
	"bytes"
	"encoding/json"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/santhosh-tekuri/jsonschema/v6"
)

var (
	schemaOnce sync.Once
	schemaC    *jsonschema.Schema
	schemaErr  error
)

// compiledSchema compiles the embedded record schema (draft 2020-12) with
// format assertions on, so "date-time" is checked.
func compiledSchema(t testing.TB) *jsonschema.Schema {
	t.Helper()
	schemaOnce.Do(func() {
		doc, err := jsonschema.UnmarshalJSON(bytes.NewReader(Schema()))
		if err != nil {
			schemaErr = err
			return
		}
		c := jsonschema.NewCompiler()
		c.DefaultDraft(jsonschema.Draft2020)
		c.AssertFormat()
		if err := c.AddResource("record.schema.json", doc); err != nil {
			schemaErr = err
			return
		}
		schemaC, schemaErr = c.Compile("record.schema.json")
	})
	if schemaErr != nil {
		t.Fatalf("compile schema: %v", schemaErr)
	}
	return schemaC
}

// validateJSON validates one encoded record against the schema.
func validateJSON(t testing.TB, data []byte) error {
	t.Helper()
	inst, err := jsonschema.UnmarshalJSON(bytes.NewReader(data))
	if err != nil {
		return err
	}
	return compiledSchema(t).Validate(inst)
}

func validateRecord(t testing.TB, r *Record) {
	t.Helper()
	data, err := json.Marshal(r)
	if err != nil {
		t.Fatalf("marshal %s rev %d: %v", r.ID, r.Revision, err)
	}
	if err := validateJSON(t, data); err != nil {
		t.Fatalf("record %s rev %d does not validate: %v\n%s", r.ID, r.Revision, err, data)
	}
}

// TestSchemaRejects checks that the schema is not vacuous: records broken
// in one field each must fail.
func TestSchemaRejects(t *testing.T) {
	end := sec(20)
	good := Record{
		ID: "u/model/20260302T080003Z", Revision: 1, Kind: KindIncident, Unit: "u", Group: GroupModel,
		Statistics: []RecordStat{{Name: "t2", Peak: 12, Limit: 10, Ratio: 1.2, PeakTime: sec(3), State: "active"}},
		Start:      sec(3), Updated: sec(3), State: "active",
		Peak:     Peak{Statistic: "t2", Value: 12, Limit: 10, Ratio: 1.2, Time: sec(3)},
		Severity: "low", Contributors: []RecordContributor{{Rank: 1, Channel: "u.a.x", Share: 0.7, RBC: 3, RBCLimit: 1, Modes: []int{0}}},
		Missing: []string{}, ModelState: ModelFrozen, Caution: Caution,
	}
	validateRecord(t, &good)
	cases := map[string]func(r *Record){
		"caution":      func(r *Record) { r.Caution = "Advisory." },
		"revision -1":  func(r *Record) { r.Revision = -1 },
		"kind":         func(r *Record) { r.Kind = "alarm" },
		"model state":  func(r *Record) { r.ModelState = "learning" },
		"share > 1":    func(r *Record) { r.Contributors[0].Share = 1.5 },
		"no stats":     func(r *Record) { r.Statistics = []RecordStat{} },
		"end no why":   func(r *Record) { r.End = &end; r.State = "normal" },
		"end active":   func(r *Record) { r.End = &end; r.EndReason = EndReturned },
		"flood fields": func(r *Record) { r.Members = []Member{{ID: "u/x/1", Alarm: "model", Start: sec(1), Severity: "low"}} },
		"quality null": func(r *Record) { r.Group = GroupQuality },
		"quality set":  func(r *Record) { r.Quality = &RecordQuality{Kind: QualityStuck, Channel: "c"} },
	}
	for name, mut := range cases {
		t.Run(name, func(t *testing.T) {
			r := good
			r.Contributors = []RecordContributor{good.Contributors[0]}
			mut(&r)
			data, _ := json.Marshal(&r)
			if err := validateJSON(t, data); err == nil {
				t.Errorf("broken record validates:\n%s", data)
			}
		})
	}
	// A bad date-time string must fail (format assertion on).
	data, _ := json.Marshal(&good)
	bad := strings.Replace(string(data), good.Start.Format(time.RFC3339Nano), "2026-13-45T99:00:00Z", 1)
	if err := validateJSON(t, []byte(bad)); err == nil {
		t.Errorf("bad date-time validates")
	}
}

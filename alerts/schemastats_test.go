package alerts

import (
	"encoding/json"
	"slices"
	"testing"
)

// TestSchemaStatistics: the record schema names every statistic the engine
// keeps an alarm for (statNames), so that a record an incident of res, var,
// rel, mewma or creep opens validates against the schema it is published
// with.
func TestSchemaStatistics(t *testing.T) {
	var doc struct {
		Defs struct {
			Stat struct {
				Properties struct {
					Name struct {
						Enum []string `json:"enum"`
					} `json:"name"`
				} `json:"properties"`
			} `json:"stat"`
		} `json:"$defs"`
	}
	if err := json.Unmarshal(Schema(), &doc); err != nil {
		t.Fatal(err)
	}
	got := doc.Defs.Stat.Properties.Name.Enum
	for _, n := range statNames {
		if !slices.Contains(got, n) {
			t.Errorf("schema's statistic names %v lack %q", got, n)
		}
	}
	if len(got) != len(statNames) {
		t.Errorf("schema names %d statistics %v, the engine %d %v", len(got), got, len(statNames), statNames)
	}
}

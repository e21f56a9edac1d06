package pipeline

import (
	"slices"
	"testing"

	"modewatch/configs"
)

// TestKept: the model settings of a configuration that a model file's
// units do not take (Kept), table-driven over configurations laid on one
// file of two units: a, fitted with the defaults (and the half-life 0, as
// fit writes it), and b, fitted with alpha 0.002. Listed: a setting
// changed from its default that differs from a unit's fitted value, with
// the units it concerns and its first unit's values; not listed: a
// setting at its default (the half-life, although the file has 0), one
// equal to the fitted value (b's alpha), one for a unit the file does not
// hold.
func TestKept(t *testing.T) {
	def := settingsOf(configs.DefaultModel())
	def.HalfLife = 0
	b := def
	b.Alpha = 0.002
	mf := &ModelFile{Units: []ModelUnit{{Name: "a", Settings: def}, {Name: "b", Settings: b}}}
	for _, tc := range []struct {
		name, yaml string
		want       []KeptSetting
	}{
		{"defaults", "", nil},
		{"alpha 0.002, as b was fitted", "model: {alpha: 0.002}\n", []KeptSetting{{Name: "alpha", Configured: "0.002", Fitted: "0.01", Units: []string{"a"}}}},
		{"alpha 0.005", "model: {alpha: 0.005}\n", []KeptSetting{{Name: "alpha", Configured: "0.005", Fitted: "0.01", Units: []string{"a", "b"}}}},
		{"unit override and half-life", "model: {halflife: 2d}\nunits:\n  - name: b\n    model: {warmup: 300}\n  - name: c\n    model: {warmup: 200}\n",
			[]KeptSetting{{Name: "halflife", Configured: "48h0m0s", Fitted: "0s", Units: []string{"a", "b"}},
				{Name: "warmup", Configured: "300", Fitted: "500", Units: []string{"b"}}}},
	} {
		cfg, err := configs.Parse("k.yaml", []byte(tc.yaml))
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		got := mf.Kept(cfg)
		if !slices.EqualFunc(got, tc.want, func(x, y KeptSetting) bool {
			return x.Name == y.Name && x.Configured == y.Configured && x.Fitted == y.Fitted && slices.Equal(x.Units, y.Units)
		}) {
			t.Errorf("%s: got %+v, want %+v", tc.name, got, tc.want)
		}
	}
}

package pipeline

import (
	"strconv"
	"time"

	"modewatch/configs"
)

// fixedSettings are the model settings a fitted model file fixes for the
// units it holds, by their key in the configuration's model section, with
// the value of each in ModelSettings as text: a unit's tracker state is
// valid only under the settings it was fitted with, so replay and run use
// the file's values for its units whatever the configuration says.
var fixedSettings = []struct {
	name  string
	value func(ModelSettings) string
}{
	{"sparsity", func(s ModelSettings) string { return s.Sparsity }},
	{"modes", func(s ModelSettings) string { return s.Modes }},
	{"max_modes", func(s ModelSettings) string { return strconv.Itoa(s.MaxModes) }},
	{"halflife", func(s ModelSettings) string { return time.Duration(s.HalfLife).String() }},
	{"alpha", func(s ModelSettings) string { return strconv.FormatFloat(s.Alpha, 'g', -1, 64) }},
	{"warmup", func(s ModelSettings) string { return strconv.Itoa(s.WarmUp) }},
	{"refresh_every", func(s ModelSettings) string { return strconv.Itoa(s.RefreshEvery) }},
	{"statistics", func(s ModelSettings) string { return s.Statistics }},
	{"smoothing", func(s ModelSettings) string { return strconv.FormatFloat(s.Smoothing, 'g', -1, 64) }},
	{"lags", func(s ModelSettings) string { return strconv.Itoa(s.Lags) }},
	{"mewma_lambda", func(s ModelSettings) string { return strconv.FormatFloat(s.MewmaLambda, 'g', -1, 64) }},
	{"creep_lambda", func(s ModelSettings) string { return strconv.FormatFloat(s.CreepLambda, 'g', -1, 64) }},
	{"level_window", func(s ModelSettings) string { return configs.FormatDuration(time.Duration(s.LevelWindow)) }},
}

// FixedSettings returns the keys (in the configuration's model section)
// of the settings a fitted model file fixes for its units.
func FixedSettings() []string {
	out := make([]string, len(fixedSettings))
	for i, f := range fixedSettings {
		out[i] = f.name
	}
	return out
}

// KeptSetting is a model setting that the configuration changes from its
// default for some units of a model file, which keep the value they were
// fitted with instead.
type KeptSetting struct {
	Name       string   // key in the model section ("halflife")
	Configured string   // the configuration's value for the first unit named
	Fitted     string   // the file's value for that unit
	Units      []string // the units concerned, in the file's order
}

// Kept lists, in the order of FixedSettings, the fixed settings whose
// value under cfg (cfg.ModelFor, per-unit overrides included) differs
// both from its default and from the value a unit of m was fitted with:
// a setting the user changed that does not apply to that unit. A setting
// left at its default is not listed even where the file differs (fit
// writes the half-life 0, for one). Each setting's Configured and Fitted
// are those of its first unit.
func (m *ModelFile) Kept(cfg *configs.Config) []KeptSetting {
	def := settingsOf(configs.DefaultModel())
	var out []KeptSetting
	for _, f := range fixedSettings {
		var k *KeptSetting
		for _, u := range m.Units {
			conf := f.value(settingsOf(cfg.ModelFor(u.Name)))
			fit := f.value(u.Settings)
			if conf == f.value(def) || conf == fit {
				continue
			}
			if k == nil {
				out = append(out, KeptSetting{Name: f.name, Configured: conf, Fitted: fit})
				k = &out[len(out)-1]
			}
			k.Units = append(k.Units, u.Name)
		}
	}
	return out
}

package stream

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"sync"
)

// DefaultMaxChannels caps auto-discovery when Options.MaxChannels is zero.
const DefaultMaxChannels = 10000

// ErrRefused reports a channel that auto-discovery did not register: the
// registry is at its cap, or the derived name is already used by another
// series.
var ErrRefused = errors.New("channel refused")

// Tag is one tag of a series, after unescaping.
type Tag struct {
	Key, Value string
}

// Channel describes channel i of a registry. Values are in EngUnit.
type Channel struct {
	// Name is the channel's identity, stable across runs: the configured name
	// or, by default, measurement.tagvalues.field.
	Name        string
	Measurement string
	Tags        []Tag // sorted by key
	Field       string
	Display     string // human name; defaults to Name
	EngUnit     string // engineering unit, e.g. "degC"; may be empty
	Unit        string // plant unit the channel belongs to; default Measurement
	Model       bool   // takes part in the model
	// Min and Max bound the valid range (inclusive). A reading outside it is
	// missing and counted as out of range. Unbounded sides are -Inf / +Inf.
	Min, Max float64
	// BoolAsNumber maps boolean fields to 0 (false) and 1 (true); without it
	// booleans are ignored and counted.
	BoolAsNumber bool
}

// ChannelSpec is one entry of a configured channel map. Pointer fields are
// optional: nil Min/Max means unbounded, nil Model means true.
type ChannelSpec struct {
	Name         string // default measurement.tagvalues.field
	Measurement  string
	Tags         map[string]string // the exact tag set of the series
	Field        string
	Display      string
	EngUnit      string
	Min, Max     *float64
	Model        *bool
	BoolAsNumber bool
	Unit         string // default Measurement
}

// Channels is the channel registry: it maps (measurement, tag set, field) to
// channel indices 0..Len()-1. Indices never change once given; the registry
// only grows (by auto-discovery). The read methods are safe for concurrent
// use with an Intake that is adding channels.
type Channels struct {
	mu     sync.RWMutex
	list   []Channel
	byName map[string]int

	// Owned by the decoding goroutine.
	series  map[string]*series
	auto    bool
	max     int
	refused map[string]struct{} // distinct refused keys, bounded
}

// series is one measurement + tag set with the channels of its fields.
type series struct {
	name        string // measurement.tagvalues
	measurement string
	tags        []Tag
	fields      map[string]int32 // field key -> channel
	// order caches the channel of the field at each position of the last
	// line seen, so lines with a stable field order need no hashing.
	order     []int32
	orderKeys []string
}

const maxRefusedKeys = 4096

// NewChannels returns a registry. With no specs it auto-discovers channels,
// up to maxAuto (DefaultMaxChannels when 0). Every problem in specs is
// reported at once, each naming the entry.
func NewChannels(specs []ChannelSpec, maxAuto int) (*Channels, error) {
	if maxAuto <= 0 {
		maxAuto = DefaultMaxChannels
	}
	c := &Channels{
		byName:  make(map[string]int),
		series:  make(map[string]*series),
		auto:    len(specs) == 0,
		max:     maxAuto,
		refused: make(map[string]struct{}),
	}
	var errs []error
	var key []byte
	for i, sp := range specs {
		where := fmt.Sprintf("channel %d", i+1)
		if sp.Name != "" {
			where += fmt.Sprintf(" (%s)", sp.Name)
		}
		if sp.Measurement == "" {
			errs = append(errs, fmt.Errorf("stream: %s: measurement is empty", where))
		}
		if sp.Field == "" {
			errs = append(errs, fmt.Errorf("stream: %s: field is empty", where))
		}
		if sp.Min != nil && sp.Max != nil && !(*sp.Min <= *sp.Max) {
			errs = append(errs, fmt.Errorf("stream: %s: min %g is above max %g", where, *sp.Min, *sp.Max))
		}
		if sp.Measurement == "" || sp.Field == "" {
			continue
		}
		tags := make([]Tag, 0, len(sp.Tags))
		for k, v := range sp.Tags {
			tags = append(tags, Tag{k, v})
		}
		sort.Slice(tags, func(a, b int) bool { return tags[a].Key < tags[b].Key })
		key = appendSeriesKey(key[:0], sp.Measurement, tags)
		s := c.series[string(key)]
		if s == nil {
			s = newSeries(sp.Measurement, tags)
			c.series[string(key)] = s
		}
		if j, dup := s.fields[sp.Field]; dup {
			errs = append(errs, fmt.Errorf("stream: %s: same series and field as %s", where, c.list[j].Name))
			continue
		}
		ch := Channel{
			Name: sp.Name, Measurement: sp.Measurement, Tags: tags, Field: sp.Field,
			Display: sp.Display, EngUnit: sp.EngUnit, Unit: sp.Unit, Model: true,
			Min: math.Inf(-1), Max: math.Inf(1), BoolAsNumber: sp.BoolAsNumber,
		}
		if ch.Name == "" {
			ch.Name = s.name + "." + sp.Field
		}
		if sp.Model != nil {
			ch.Model = *sp.Model
		}
		if sp.Min != nil {
			ch.Min = *sp.Min
		}
		if sp.Max != nil {
			ch.Max = *sp.Max
		}
		if _, taken := c.byName[ch.Name]; taken {
			errs = append(errs, fmt.Errorf("stream: %s: name %q is used twice", where, ch.Name))
			continue
		}
		c.add(s, ch)
	}
	if err := errors.Join(errs...); err != nil {
		return nil, err
	}
	return c, nil
}

func newSeries(measurement string, tags []Tag) *series {
	var b strings.Builder
	b.WriteString(measurement)
	for _, t := range tags {
		b.WriteByte('.')
		b.WriteString(t.Value)
	}
	return &series{name: b.String(), measurement: measurement, tags: tags, fields: make(map[string]int32)}
}

// add registers ch as the next channel of s.
func (c *Channels) add(s *series, ch Channel) int {
	if ch.Display == "" {
		ch.Display = ch.Name
	}
	if ch.Unit == "" {
		ch.Unit = ch.Measurement
	}
	c.mu.Lock()
	i := len(c.list)
	c.list = append(c.list, ch)
	c.byName[ch.Name] = i
	c.mu.Unlock()
	s.fields[ch.Field] = int32(i)
	return i
}

// appendSeriesKey appends the lookup key of a series: the measurement and the
// sorted tags separated by NUL, a byte line protocol does not allow in names
// (the decoder rejects control characters there).
func appendSeriesKey(dst []byte, measurement string, tags []Tag) []byte {
	dst = append(dst, measurement...)
	for _, t := range tags {
		dst = append(dst, 0)
		dst = append(dst, t.Key...)
		dst = append(dst, 0)
		dst = append(dst, t.Value...)
	}
	return dst
}

// discover registers field of s as a new auto-discovered channel.
func (c *Channels) discover(s *series, field string) (int, error) {
	name := s.name + "." + field
	c.mu.RLock()
	n := len(c.list)
	_, taken := c.byName[name]
	c.mu.RUnlock()
	if n >= c.max {
		return -1, fmt.Errorf("stream: %s: registry is at its cap of %d channels: %w", name, c.max, ErrRefused)
	}
	if taken {
		return -1, fmt.Errorf("stream: %s: name already used by another series (tag values containing '.'?): %w", name, ErrRefused)
	}
	return c.add(s, Channel{
		Name: name, Measurement: s.measurement, Tags: s.tags, Field: field,
		Model: true, Min: math.Inf(-1), Max: math.Inf(1),
	}), nil
}

// noteRefused records a refused series field and reports whether it is the
// first time (so the caller reports it once).
func (c *Channels) noteRefused(key []byte) bool {
	if _, seen := c.refused[string(key)]; seen {
		return false
	}
	if len(c.refused) >= maxRefusedKeys {
		return false
	}
	c.refused[string(key)] = struct{}{}
	return true
}

// Len returns the number of channels.
func (c *Channels) Len() int {
	c.mu.RLock()
	defer c.mu.RUnlock()
	return len(c.list)
}

// Auto reports whether the registry discovers channels from the data.
func (c *Channels) Auto() bool { return c.auto }

// Channel returns channel i. It panics if i is out of range.
func (c *Channels) Channel(i int) Channel {
	c.mu.RLock()
	defer c.mu.RUnlock()
	return c.list[i]
}

// Index returns the index of the channel called name.
func (c *Channels) Index(name string) (int, bool) {
	c.mu.RLock()
	defer c.mu.RUnlock()
	i, ok := c.byName[name]
	return i, ok
}

// Names appends the channel names in index order to dst.
func (c *Channels) Names(dst []string) []string {
	c.mu.RLock()
	defer c.mu.RUnlock()
	for _, ch := range c.list {
		dst = append(dst, ch.Name)
	}
	return dst
}

// List returns a copy of all channels in index order.
func (c *Channels) List() []Channel {
	c.mu.RLock()
	defer c.mu.RUnlock()
	return append([]Channel(nil), c.list...)
}

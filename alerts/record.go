package alerts

import (
	"strings"
	"time"
)

// Record kinds.
const (
	KindIncident = "incident" // one alarm group of one unit in alarm
	KindFlood    = "flood"    // a flood of new alerts of one unit, grouped
)

// Record groups.
const (
	GroupModel   = "model"   // the statistics T², SPE and φ of a unit together
	GroupQuality = "quality" // one data-quality condition of one channel
	GroupFlood   = "flood"
)

// End reasons.
const (
	EndReturned    = "returned"    // every alarm of the incident returned to normal
	EndMaintenance = "maintenance" // the unit went into maintenance
	EndQuiet       = "quiet"       // a chattering alarm stayed quiet for the chatter window
	EndFloodOver   = "flood_over"  // the flood's trailing count dropped below the end figure
)

// Record is one alert: one incident (or one flood), republished with a new
// Revision whenever it changes. (ID, Revision) is the deduplication key of
// one publication; ID alone identifies the incident. The JSON form is
// described by the schema returned by Schema.
type Record struct {
	ID           string              `json:"id"`
	Revision     int                 `json:"revision"`
	Kind         string              `json:"kind"`
	Unit         string              `json:"unit"`
	Group        string              `json:"group"`
	Statistics   []RecordStat        `json:"statistics"`
	Quality      *RecordQuality      `json:"quality"`
	Start        time.Time           `json:"start"`
	End          *time.Time          `json:"end"`
	Updated      time.Time           `json:"updated"` // frame time of the latest frame the record reflects; never before a peak time
	State        string              `json:"state"`
	Peak         Peak                `json:"peak"`
	Severity     string              `json:"severity"`
	Contributors []RecordContributor `json:"contributors"`
	Missing      []string            `json:"missing"`
	ModelState   string              `json:"model_state"`
	Acknowledged *Ack                `json:"acknowledged"`
	Shelved      *Shelve             `json:"shelved"`
	StaleAlarm   bool                `json:"stale_alarm"`
	Chattering   *Chatter            `json:"chattering"`
	Members      []Member            `json:"members,omitempty"`
	MemberCount  int                 `json:"member_count,omitempty"`
	EndReason    string              `json:"end_reason,omitempty"`
	// Location: the channels of a model incident's location (sorted);
	// Merged: ids of later incidents that grew into this one; MergedInto:
	// the incident this one grew into (end reason "merged"). Accepted: who
	// accepted the incident as the new normal and when (an operator, or
	// the bounded hold after accept_after flat).
	Location   []string `json:"location,omitempty"`
	Merged     []string `json:"merged,omitempty"`
	MergedInto string   `json:"merged_into,omitempty"`
	Accepted   *Ack     `json:"accepted,omitempty"`
	// Reopened counts the returns of a model incident to normal after
	// which it re-opened within alerts.reopen_within (re-alarm of the same
	// disturbance), LastReopened the frame time of the latest.
	Reopened     int        `json:"reopened,omitempty"`
	LastReopened *time.Time `json:"last_reopened,omitempty"`
	// Notice is the text of an informational record (Kind KindNotice).
	Notice  string `json:"notice,omitempty"`
	Caution string `json:"caution"`
}

// RecordStat is the peak of one statistic during the incident.
type RecordStat struct {
	Name     string    `json:"name"`
	Peak     float64   `json:"peak"`
	Limit    float64   `json:"limit"`
	Ratio    float64   `json:"ratio"`
	PeakTime time.Time `json:"peak_time"`
	State    string    `json:"state"`
}

// RecordQuality names the data-quality condition of a quality incident.
type RecordQuality struct {
	Kind    string `json:"kind"`
	Channel string `json:"channel"`
	// Level is a level shift's size at the incident's peak, in the
	// channel's engineering unit (QualityLevelShift only).
	Level *LevelStep `json:"level,omitempty"`
}

// LevelStep says how far a channel shifted against its relations: its
// mean over the window before and over the window after the step, and the
// part of the difference the unit's other channels do not explain (the
// step of its conditional residual), all in the channel's unit, e.g.
//
//	level_shift air.header.pressure: 6.80 → 7.20 (means over 5m0s before and after), 0.38 not explained by the other channels
//
// (RecordQuality.Describe).
type LevelStep struct {
	Before Number   `json:"before"`
	After  Number   `json:"after"`
	Step   Number   `json:"unexplained"`
	Window Duration `json:"window"`
}

// Peak is the largest value/limit ratio of the incident.
type Peak struct {
	Statistic string    `json:"statistic"`
	Value     float64   `json:"value"`
	Limit     float64   `json:"limit"`
	Ratio     float64   `json:"ratio"`
	Time      time.Time `json:"time"`
}

// RecordContributor is one ranked channel of a record. In a model
// incident's record the channels that went over their own contribution
// limit come first, by their summed excess over the incident, each as at
// the frame of its own largest RBC/limit; then the other channels of the
// peak frame, as at that frame (excess.go).
type RecordContributor struct {
	Rank     int     `json:"rank"`
	Channel  string  `json:"channel"`
	Share    float64 `json:"share"`
	RBC      float64 `json:"rbc"`
	RBCLimit float64 `json:"rbc_limit"`
	Modes    []int   `json:"modes"`
	// Reading is the channel's value at that frame, Expected the value
	// the other channels imply under the model there and Band
	// the half-width of the band Expected ± Band that holds the
	// fault-free value with the probability BandCoverage; all in the
	// channel's engineering unit, null where unknown (see
	// RecordContributor.Expectation).
	Reading      Number  `json:"reading"`
	Expected     Number  `json:"expected"`
	Band         Number  `json:"band"`
	BandCoverage float64 `json:"band_coverage,omitempty"`
}

// Ack records who acknowledged the alert and when (wall-clock time of the
// command).
type Ack struct {
	By      string    `json:"by"`
	At      time.Time `json:"at"`
	Comment string    `json:"comment,omitempty"`
}

// Shelve records a shelve: the alarm group is hidden until Until (frame
// time).
type Shelve struct {
	Until  time.Time `json:"until"`
	By     string    `json:"by"`
	Reason string    `json:"reason,omitempty"`
}

// Chatter reports a chattering alarm: its activations within the episode.
type Chatter struct {
	Activations int       `json:"activations"`
	First       time.Time `json:"first"`
	Last        time.Time `json:"last"`
}

// Member is one incident of a flood. Alarm is the alarm group key of the
// incident: "model" or "<quality kind>:<channel>".
type Member struct {
	ID       string     `json:"id"`
	Alarm    string     `json:"alarm"`
	Start    time.Time  `json:"start"`
	End      *time.Time `json:"end"`
	Severity string     `json:"severity"`
}

// idTime is the time layout inside alert ids: UTC, compact, trailing zeros
// of the fraction dropped.
const idTime = "20060102T150405.999999999Z"

// MakeID returns the stable id of an incident of group key g of unit u
// starting at t: "<unit>/<group key>/<start>". Replaying the same frames
// gives the same ids, so sinks and consumers can deduplicate.
func MakeID(unit, groupKey string, t time.Time) string {
	var b strings.Builder
	b.Grow(len(unit) + len(groupKey) + 2 + len(idTime))
	b.WriteString(unit)
	b.WriteByte('/')
	b.WriteString(groupKey)
	b.WriteByte('/')
	b.WriteString(t.UTC().Format(idTime))
	return b.String()
}

// Channels returns the channels record r names, most telling first: its
// first n ranked contributors (all of them when n ≤ 0), or, for a
// data-quality alert without contributors, its one channel. It also
// returns what r is about: the statistic of its peak, or the data-quality
// kind.
func (r *Record) Channels(n int) (about string, channels []string) {
	about = r.Peak.Statistic
	for i, c := range r.Contributors {
		if n > 0 && i == n {
			break
		}
		channels = append(channels, c.Channel)
	}
	if len(channels) == 0 && r.Quality != nil {
		about, channels = r.Quality.Kind, []string{r.Quality.Channel}
	}
	return about, channels
}

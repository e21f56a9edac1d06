package alerts

import "time"

// Notice records: informational, not alerts. They open and close at once,
// never count as alerts (no alarm state, no flood, no freeze) and carry
// what happened in Record.Notice.
const (
	KindNotice  = "notice" // an informational record (a new operating state or point)
	GroupState  = "state"  // the unit's operating state
	EndNoted    = "noted"  // a notice: closed when published
	SeverityLog = "info"   // the severity of a notice
)

// Notice publishes one informational record of unit at t in group (e.g.
// GroupState) with text; key makes its ID (unit/group:key/time) unique.
// It steps no alarm and counts as no alert; a unit in maintenance gets
// none. It reports whether a record was published.
func (e *Engine) Notice(unit, group, key, text string, t time.Time) bool {
	e.mu.Lock()
	defer e.mu.Unlock()
	u := e.unit(unit)
	if u.maint {
		return false
	}
	e.pub.Publish(e.noticeRecord(u, group, key, text, t))
	return true
}

// noticeRecord builds the informational record of u at t (see Notice).
func (e *Engine) noticeRecord(u *unit, group, key, text string, t time.Time) *Record {
	model := u.model
	if model == "" {
		model = ModelAdapting
	}
	end := t.UTC()
	return &Record{
		ID: MakeID(u.name, group+":"+key, t), Revision: 1, Kind: KindNotice, Unit: u.name, Group: group,
		Statistics: []RecordStat{}, Contributors: []RecordContributor{}, Missing: []string{},
		Start: t.UTC(), End: &end, Updated: t.UTC(), State: Normal.String(), Severity: SeverityLog,
		Peak: Peak{Statistic: group, Value: 1, Limit: 1, Ratio: 1, Time: t.UTC()}, ModelState: model, EndReason: EndNoted,
		Notice: text, Caution: Caution,
	}
}

package alerts

import (
	"testing"
	"time"
)

// TestTick: with the frames stopped, Tick ends shelves, floods and
// chattering at the same instants as frames would (the L3 and L4 cases of
// TestFlood and TestChattering: ISA-18.2 flood end and chattering as quoted
// in public secondary text), and a late frame from before the tick is
// still accepted.
func TestTick(t *testing.T) {
	t.Run("shelf expires", func(t *testing.T) {
		h := newHarness(t, Config{Rules: Rules{OnCount: 1, OnWindow: 1, OffDelay: 5 * time.Second}, MaxShelve: time.Hour})
		h.model(0, 2)
		id := h.last().ID
		if rep := h.cmd(Command{Op: OpShelve, AlertID: id, By: "jo", Reason: "instrument work", For: Duration(60 * time.Second)}); !rep.OK {
			t.Fatal(rep)
		}
		h.model(1, 2)
		n := len(h.recs)
		if !h.e.Tick("u", sec(59)) || len(h.recs) != n {
			t.Fatalf("tick before the shelf's end: %d records", len(h.recs)-n)
		}
		h.e.Tick("u", sec(60))
		equalStrings(t, "shelf events", h.eventsOf(EventShelve, EventUnshelve), []string{"shelve@0", "unshelve@60"})
		if r := h.last(); len(h.recs) != n+1 || r.ID != id || r.Shelved != nil || !r.Updated.Equal(sec(60)) {
			t.Errorf("after the tick: %d records, last %+v", len(h.recs)-n, r)
		}
		// A backlog frame from before the tick is accepted.
		h.model(2, 2)
		if c := h.e.Counters(nil)[0]; c.Frames != 3 || c.OutOfOrder != 0 {
			t.Errorf("counters after a frame older than the tick: %+v", c)
		}
	})
	t.Run("flood ends", func(t *testing.T) {
		h := newHarness(t, Config{})
		stuckAt(h, every(0, 55, 11)) // the flood starts at 550 s; no frame after
		h.e.Tick("u", sec(929))
		if ev := h.eventsOf(EventFloodEnd); len(ev) != 0 {
			t.Fatalf("flood ended early: %v", ev)
		}
		h.e.Tick("u", sec(930))
		equalStrings(t, "flood end", h.eventsOf(EventFloodEnd), []string{"flood_end@930"})
		if r := h.lastOf(KindFlood); r.End == nil || !r.End.Equal(sec(930)) || r.EndReason != EndFloodOver {
			t.Errorf("flood record after the tick: %+v", r)
		}
	})
	t.Run("chattering ends", func(t *testing.T) {
		h := chatter(t, []float64{0, 20, 40, 50}, 60) // frames stop at 60 s
		h.e.Tick("u", sec(109))
		h.e.Tick("u", sec(110))
		equalStrings(t, "chatter events", h.eventsOf(EventChatterStart, EventChatterEnd), []string{"chatter_start@40", "chatter_end@110"})
		if r := h.last(); r.End == nil || !r.End.Equal(sec(110)) || r.EndReason != EndQuiet {
			t.Errorf("chattering record after the tick: %+v", r)
		}
	})
	t.Run("no effect", func(t *testing.T) {
		h := newHarness(t, Config{})
		if h.e.Tick("u", sec(10)) {
			t.Error("tick of a unit without frames")
		}
		h.model(5, 0.5)
		if h.e.Tick("u", sec(5)) || h.e.Tick("u", sec(4)) {
			t.Error("tick at or before the last frame")
		}
		if !h.e.Tick("u", sec(8)) || h.e.Tick("u", sec(7)) {
			t.Error("tick not after the last tick")
		}
		on := true
		h.cmd(Command{Op: OpMaintenance, Unit: "u", On: &on, By: "jo"})
		if h.e.Tick("u", sec(20)) {
			t.Error("tick in maintenance")
		}
		if got := h.e.LastFrame("u"); !got.Equal(sec(5)) {
			t.Errorf("last frame %v after ticks, want %v", got, sec(5))
		}
	})
}

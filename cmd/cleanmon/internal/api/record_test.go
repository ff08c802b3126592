package api

import (
	"testing"
	"time"

	"cleanmon/alerts"
	"cleanmon/alerts/investigate"
)

// TestLevelTimeline: the attention level rebuilt from alarms is the worst
// alarm open at each moment, none between them, unknown (no change on
// record) before the zone's first reading; an alarm still in its delay
// called nobody and does not count.
func TestLevelTimeline(t *testing.T) {
	t0 := time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC)
	at := func(m int) time.Time { return t0.Add(time.Duration(m) * time.Minute) }
	ptr := func(m int) *time.Time { v := at(m); return &v }
	alarms := []alerts.Alarm{
		{ID: "a", Level: alerts.LevelAlert, State: alerts.StateCleared, Since: at(9), ActiveSince: ptr(10), ClearedAt: ptr(40)},
		{ID: "b", Level: alerts.LevelAction, State: alerts.StateCleared, Since: at(20), ClearedAt: ptr(30)},
		{ID: "c", Level: alerts.LevelAction, State: alerts.StateDelayed, Since: at(50)},
		{ID: "d", Level: alerts.LevelAction, State: alerts.StateActive, Since: at(60)},
	}
	got := levelTimeline(alarms, at(5))
	want := []investigate.LevelChange{
		{Time: at(5), Level: "none"}, {Time: at(10), Level: "alert"}, {Time: at(20), Level: "action"},
		{Time: at(30), Level: "alert"}, {Time: at(40), Level: "none"}, {Time: at(60), Level: "action"},
	}
	if len(got) != len(want) {
		t.Fatalf("timeline %v, want %v", got, want)
	}
	for i := range want {
		if !got[i].Time.Equal(want[i].Time) || got[i].Level != want[i].Level {
			t.Errorf("change %d: %s %s, want %s %s", i, got[i].Time.Format("15:04"), got[i].Level, want[i].Time.Format("15:04"), want[i].Level)
		}
	}
	// From 06:00 to 07:10: 5 min unknown, 25 none, 20 alert, 20 action.
	by := investigate.TimeByLevel(got, at(0), at(70))
	for level, m := range map[string]int{"unknown": 5, "none": 25, "alert": 20, "action": 20} {
		if by[level] != time.Duration(m)*time.Minute {
			t.Errorf("%s: %s, want %d min", level, by[level], m)
		}
	}
	if levelTimeline(alarms, time.Time{}) != nil {
		t.Error("a zone without readings has a timeline; want none (all unknown)")
	}
}

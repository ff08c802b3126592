package investigate

import (
	"errors"
	"maps"
	"testing"
	"time"
)

func hm(h, m int) time.Time { return time.Date(2026, 3, 2, h, m, 0, 0, time.UTC) }

func TestRunExposureAlarms(t *testing.T) {
	run := Run{ID: "R-1", Zone: "assembly", Start: hm(8, 0), End: hm(12, 0), Product: "lens L-40", Lot: "L-40-0311"}
	now := hm(15, 0)
	tests := []struct {
		name  string
		alarm Alarm
		want  bool
	}{
		{"inside", Alarm{Since: hm(9, 0), Cleared: hm(9, 30)}, true},
		{"cleared exactly at the run's start", Alarm{Since: hm(7, 0), Cleared: hm(8, 0)}, true},
		{"cleared a minute before the start", Alarm{Since: hm(7, 0), Cleared: hm(7, 59)}, false},
		{"began exactly at the run's end", Alarm{Since: hm(12, 0), Cleared: hm(13, 0)}, true},
		{"began a minute after the end", Alarm{Since: hm(12, 1), Cleared: hm(13, 0)}, false},
		{"spanning the whole run", Alarm{Since: hm(6, 0), Cleared: hm(13, 0)}, true},
		{"still open, begun before the run", Alarm{Since: hm(6, 0)}, true},
		{"another zone", Alarm{Zone: "gowning", Since: hm(9, 0), Cleared: hm(9, 30)}, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			a := tc.alarm
			a.ID = "A-1"
			if a.Zone == "" {
				a.Zone = "assembly"
			}
			ex, err := RunExposure(run, now, []Alarm{a}, nil, nil)
			if err != nil {
				t.Fatal(err)
			}
			if got := len(ex.Alarms) == 1; got != tc.want {
				t.Errorf("run exposure lists the alarm: %v, want %v", got, tc.want)
			}
			if got := len(AlarmRuns(a, now, []Run{run})) == 1; got != tc.want {
				t.Errorf("alarm's runs list the run: %v, want %v", got, tc.want)
			}
		})
	}
}

func TestOpenRunAndOpenAlarm(t *testing.T) {
	run := Run{ID: "R-2", Zone: "assembly", Start: hm(10, 0)}
	a := Alarm{ID: "A-2", Zone: "assembly", Since: hm(11, 0)}
	if got := AlarmRuns(a, hm(10, 59), []Run{run}); len(got) != 0 {
		t.Errorf("an alarm not yet begun overlaps %v", got)
	}
	if got := AlarmRuns(a, hm(11, 0), []Run{run}); len(got) != 1 {
		t.Errorf("open alarm and open run meeting now: %v, want the run", got)
	}
	ex, err := RunExposure(run, hm(12, 0), nil, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !ex.Until.Equal(hm(12, 0)) || ex.TimeByLevel[LevelUnknown] != 2*time.Hour {
		t.Errorf("open run: until %v, levels %v; want now and 2 h unknown", ex.Until, ex.TimeByLevel)
	}
}

func TestTimeByLevel(t *testing.T) {
	levels := []LevelChange{
		{hm(9, 30), LevelAlert},
		{hm(7, 0), LevelNone},
		{hm(10, 0), LevelAction},
		{hm(10, 15), ""},
		{hm(10, 45), LevelNone},
		{hm(13, 0), LevelOutOfClass},
	}
	tests := []struct {
		name     string
		from, to time.Time
		levels   []LevelChange
		want     map[string]time.Duration
	}{
		{"no record is unknown", hm(8, 0), hm(9, 0), nil, map[string]time.Duration{LevelUnknown: time.Hour}},
		{"before the first change is unknown", hm(6, 0), hm(8, 0), levels, map[string]time.Duration{LevelUnknown: time.Hour, LevelNone: time.Hour}},
		{"change at the start holds", hm(9, 30), hm(10, 0), levels, map[string]time.Duration{LevelAlert: 30 * time.Minute}},
		{"change at the end adds nothing", hm(9, 0), hm(10, 0), levels, map[string]time.Duration{LevelNone: 30 * time.Minute, LevelAlert: 30 * time.Minute}},
		{"empty level is unknown", hm(9, 0), hm(12, 0), levels, map[string]time.Duration{
			LevelNone: 30*time.Minute + 75*time.Minute, LevelAlert: 30 * time.Minute, LevelAction: 15 * time.Minute, LevelUnknown: 30 * time.Minute}},
		{"empty span", hm(9, 0), hm(9, 0), levels, map[string]time.Duration{}},
	}
	for _, tc := range tests {
		got := TimeByLevel(tc.levels, tc.from, tc.to)
		if !maps.Equal(got, tc.want) {
			t.Errorf("%s: %v, want %v", tc.name, got, tc.want)
		}
	}
}

func TestPeaksAndRunErrors(t *testing.T) {
	series := []LocationSeries{
		{Location: "asm-1", SizeUM: 0.5, Points: []Point{{hm(7, 59), 9e6}, {hm(8, 0), 4000}, {hm(9, 0), 7000}}},
		{Location: "asm-2", SizeUM: 0.5, Points: []Point{{hm(9, 30), 7000}, {hm(12, 0), 8000}, {hm(12, 1), 9e6}}},
		{Location: "asm-2", SizeUM: 5, Points: []Point{{hm(10, 0), 30}}},
	}
	got := Peaks(series, hm(8, 0), hm(12, 0))
	want := []Peak{{0.5, "asm-2", 8000, hm(12, 0)}, {5, "asm-2", 30, hm(10, 0)}}
	if len(got) != 2 || got[0] != want[0] || got[1] != want[1] {
		t.Errorf("peaks %v, want %v (edges inside, outside points ignored)", got, want)
	}
	bad := []Run{
		{Zone: "assembly", Start: hm(8, 0)},
		{ID: "R", Start: hm(8, 0)},
		{ID: "R", Zone: "assembly"},
		{ID: "R", Zone: "assembly", Start: hm(8, 0), End: hm(8, 0)},
	}
	for i, r := range bad {
		if _, err := RunExposure(r, hm(9, 0), nil, nil, nil); !errors.Is(err, ErrInput) {
			t.Errorf("bad run %d: error %v, want ErrInput", i, err)
		}
	}
	if _, err := RunExposure(Run{ID: "R", Zone: "assembly", Start: hm(10, 0)}, hm(9, 0), nil, nil, nil); !errors.Is(err, ErrInput) {
		t.Errorf("open run starting after now: %v, want ErrInput", err)
	}
}

package site

import (
	"strings"
	"testing"
	"time"
)

func TestShiftAt(t *testing.T) {
	utc := func(s string) time.Time {
		v, err := time.Parse(time.RFC3339, s)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	// Central European Time is UTC+1, and UTC+2 in summer time, which runs
	// from 01:00 UTC on the last Sunday of March to 01:00 UTC on the last
	// Sunday of October (Directive 2000/84/EC, Articles 2 and 3): in 2026
	// the 29th of March and the 25th of October.
	cases := []struct {
		name     string
		zone     string
		shifts   []string
		at       string
		cur, prv [2]string
	}{
		{"night shift, winter", "CET", []string{"06:00", "14:00", "22:00"}, "2026-12-02T04:00:00Z",
			[2]string{"2026-12-01T21:00:00Z", "2026-12-02T05:00:00Z"}, [2]string{"2026-12-01T13:00:00Z", "2026-12-01T21:00:00Z"}},
		{"at a shift's first instant, summer", "CET", []string{"06:00", "14:00", "22:00"}, "2026-07-01T12:00:00Z",
			[2]string{"2026-07-01T12:00:00Z", "2026-07-01T20:00:00Z"}, [2]string{"2026-07-01T04:00:00Z", "2026-07-01T12:00:00Z"}},
		{"starts given out of order", "CET", []string{"22:00", "06:00", "14:00"}, "2026-07-01T11:59:59Z",
			[2]string{"2026-07-01T04:00:00Z", "2026-07-01T12:00:00Z"}, [2]string{"2026-06-30T20:00:00Z", "2026-07-01T04:00:00Z"}},
		// 22:00 CEST to 06:00 CET is nine hours.
		{"night the clocks go back", "CET", []string{"06:00", "14:00", "22:00"}, "2026-10-25T03:00:00Z",
			[2]string{"2026-10-24T20:00:00Z", "2026-10-25T05:00:00Z"}, [2]string{"2026-10-24T12:00:00Z", "2026-10-24T20:00:00Z"}},
		// 22:00 CET to 06:00 CEST is seven hours.
		{"night the clocks go forward", "CET", []string{"06:00", "14:00", "22:00"}, "2026-03-29T02:00:00Z",
			[2]string{"2026-03-28T21:00:00Z", "2026-03-29T04:00:00Z"}, [2]string{"2026-03-28T13:00:00Z", "2026-03-28T21:00:00Z"}},
		{"no shifts: the local day", "", nil, "2026-12-02T04:00:00Z",
			[2]string{"2026-12-02T00:00:00Z", "2026-12-03T00:00:00Z"}, [2]string{"2026-12-01T00:00:00Z", "2026-12-02T00:00:00Z"}},
		{"one shift a day", "Etc/GMT-3", []string{"07:30"}, "2026-12-02T04:00:00Z", // Etc/GMT-3 is UTC+3
			[2]string{"2026-12-01T04:30:00Z", "2026-12-02T04:30:00Z"}, [2]string{"2026-11-30T04:30:00Z", "2026-12-01T04:30:00Z"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg := &Config{TimeZone: c.zone, Shifts: c.shifts}
			cur, prv := cfg.ShiftAt(utc(c.at))
			got := [4]string{cur.Start.UTC().Format(time.RFC3339), cur.End.UTC().Format(time.RFC3339), prv.Start.UTC().Format(time.RFC3339), prv.End.UTC().Format(time.RFC3339)}
			want := [4]string{c.cur[0], c.cur[1], c.prv[0], c.prv[1]}
			if got != want {
				t.Errorf("ShiftAt(%s) = %v, want %v", c.at, got, want)
			}
		})
	}
}

func TestClockProblems(t *testing.T) {
	cases := []struct {
		name, add, want string
	}{
		{"unknown zone", `time_zone: "Mars/Olympus_Mons"`, `site.yaml:16:12: time_zone: "Mars/Olympus_Mons" is not a time zone of the IANA database`},
		{"host zone", `time_zone: Local`, `site.yaml:16:12: time_zone: "Local" would follow the host's clock`},
		{"not HH:MM", `shifts: ["06:00", "6:00"]`, `site.yaml:16:19: shifts[1]: "6:00" is not a start time`},
		{"hour out of range", `shifts: ["24:00"]`, `site.yaml:16:10: shifts[0]: "24:00" is not a start time`},
		{"start twice", `shifts: ["06:00", "14:00", "06:00"]`, `site.yaml:16:28: shifts[2]: "06:00" is given twice (also shifts[0])`},
		{"list expected", `shifts: "06:00"`, `site.yaml:16:9: shifts: want a list`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Load("site.yaml", []byte(baseSite+c.add+"\n"))
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Errorf("got %v, want a problem %q", err, c.want)
			}
		})
	}
	cfg, err := Load("site.yaml", []byte(baseSite+"time_zone: Etc/GMT-1\nshifts: [\"06:00\", \"18:00\"]\n"))
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Location().String() != "Etc/GMT-1" || cfg.TimeZoneName() != "Etc/GMT-1" || len(cfg.Shifts) != 2 {
		t.Errorf("decoded time_zone %v, shifts %v", cfg.Location(), cfg.Shifts)
	}
	if (&Config{}).Location() != time.UTC || (&Config{}).TimeZoneName() != "UTC" {
		t.Error("a site without time_zone is not on UTC")
	}
}

func TestDemoClock(t *testing.T) {
	cfg, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	// The demo site's shifts start at 06:00, 14:00 and 22:00.
	if strings.Join(cfg.Shifts, ",") != "06:00,14:00,22:00" || cfg.TimeZone == "" {
		t.Errorf("demo clock: time_zone %q, shifts %v", cfg.TimeZone, cfg.Shifts)
	}
}

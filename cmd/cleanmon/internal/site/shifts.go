package site

import (
	"fmt"
	"sort"
	"strconv"
	"strings"
	"time"

	// The zone database is built in: a site's time zone must mean the same
	// on a minimal container without /usr/share/zoneinfo as on a desktop,
	// or shift boundaries and shown times would move with the host.
	_ "time/tzdata"
)

// The site's clock: the pages show times and cut shifts in the site's own
// time zone (time_zone, an IANA name; UTC when not given), never in the
// browser's, so that a wall screen, a laptop at home and a report agree.

// Location is the site's time zone; UTC when none is configured. The
// configuration was checked at load, so a name that fails here (a
// Config built by hand) falls back to UTC rather than to the host's zone.
func (c *Config) Location() *time.Location {
	if c.TimeZone == "" {
		return time.UTC
	}
	loc, err := time.LoadLocation(c.TimeZone)
	if err != nil {
		return time.UTC
	}
	return loc
}

// TimeZoneName is the configured zone's name, "UTC" when none is given.
func (c *Config) TimeZoneName() string {
	if c.TimeZone == "" {
		return "UTC"
	}
	return c.TimeZone
}

// shiftStart is a shift's start as minutes after local midnight.
type shiftStart int

// parseShift reads "HH:MM" (24-hour clock).
func parseShift(s string) (shiftStart, error) {
	hh, mm, ok := strings.Cut(strings.TrimSpace(s), ":")
	if !ok || len(hh) != 2 || len(mm) != 2 {
		return 0, fmt.Errorf("%q is not a start time such as \"06:00\" (24-hour HH:MM)", s)
	}
	h, err1 := strconv.Atoi(hh)
	m, err2 := strconv.Atoi(mm)
	if err1 != nil || err2 != nil || h < 0 || h > 23 || m < 0 || m > 59 {
		return 0, fmt.Errorf("%q is not a start time such as \"06:00\" (24-hour HH:MM, 00:00–23:59)", s)
	}
	return shiftStart(h*60 + m), nil
}

// shiftStarts are the valid starts, sorted; invalid ones were refused at
// load.
func (c *Config) shiftStarts() []shiftStart {
	var out []shiftStart
	for _, s := range c.Shifts {
		if v, err := parseShift(s); err == nil {
			out = append(out, v)
		}
	}
	sort.Slice(out, func(i, j int) bool { return out[i] < out[j] })
	return out
}

// Shift is one shift: [Start, End) in the site's time zone.
type Shift struct {
	Start, End time.Time
}

// ShiftAt is the shift running at t and the one before it. Without
// configured shifts the day is one shift from local midnight, so that
// "this shift" still means something (today). Each shift ends where the
// next begins; a start that falls in a daylight-saving gap moves as
// time.Date moves it, so a shift may be an hour shorter or longer on the
// days the clocks change.
func (c *Config) ShiftAt(t time.Time) (current, previous Shift) {
	loc := c.Location()
	starts := c.shiftStarts()
	if len(starts) == 0 {
		starts = []shiftStart{0}
	}
	lt := t.In(loc)
	var cands []time.Time
	for day := -2; day <= 1; day++ {
		for _, s := range starts {
			cands = append(cands, time.Date(lt.Year(), lt.Month(), lt.Day()+day, int(s)/60, int(s)%60, 0, 0, loc))
		}
	}
	sort.Slice(cands, func(i, j int) bool { return cands[i].Before(cands[j]) })
	i := sort.Search(len(cands), func(i int) bool { return cands[i].After(t) }) - 1
	// i ≥ 1 and i+1 < len(cands): the candidates span two days before t's
	// local date to the day after it.
	return Shift{Start: cands[i], End: cands[i+1]}, Shift{Start: cands[i-1], End: cands[i]}
}

// checkClock checks time_zone and shifts, each at its own line.
func (d *nodeDecoder) checkClock(c *Config) {
	if c.TimeZone != "" {
		if c.TimeZone == "Local" {
			d.add("time_zone", "\"Local\" would follow the host's clock settings: name the site's zone, e.g. \"UTC\" or an IANA name such as \"Etc/GMT-1\"")
		} else if _, err := time.LoadLocation(c.TimeZone); err != nil {
			d.add("time_zone", "%q is not a time zone of the IANA database (e.g. \"UTC\", \"Etc/GMT-1\", or the Area/City name of the site's zone)", c.TimeZone)
		}
	}
	seen := map[shiftStart]int{}
	for i, s := range c.Shifts {
		p := fmt.Sprintf("shifts[%d]", i)
		v, err := parseShift(s)
		if err != nil {
			d.add(p, "%v", err)
			continue
		}
		if j, dup := seen[v]; dup {
			d.add(p, "%q is given twice (also shifts[%d])", s, j)
			continue
		}
		seen[v] = i
	}
}

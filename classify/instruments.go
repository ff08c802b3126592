package classify

import (
	"fmt"
	"strings"
	"time"
)

// CalibrationValidOn tells whether an instrument's calibration covers a
// moment: the due date is the last valid day (UTC), so a sample taken on
// the due date is covered and one taken the day after is not.
func (in Instrument) CalibrationValidOn(t time.Time) bool {
	due := in.CalibrationDue.UTC()
	end := time.Date(due.Year(), due.Month(), due.Day(), 0, 0, 0, 0, time.UTC).AddDate(0, 0, 1)
	return t.Before(end)
}

// checkInstruments records as departures every sample whose counter is not
// listed, has no recorded time to judge its calibration by, or was past its
// calibration due date when the sample was taken. One departure per
// counter and kind, naming the first sample concerned, so that a day of
// samples from one counter gives one line, not hundreds.
func (c *certification) checkInstruments() {
	if c.opt.Instruments == nil {
		return
	}
	byID := map[string]Instrument{}
	for _, in := range c.opt.Instruments {
		byID[strings.ToLower(in.ID)] = in
	}
	said := map[string]bool{}
	once := func(key, format string, a ...any) {
		if !said[key] {
			said[key] = true
			c.departure(format, a...)
		}
	}
	for _, id := range c.order {
		for _, s := range c.byLoc[id] {
			if s.Counter == "" {
				once("\x00nocounter", "%s names no counter: the instrument and its calibration cannot be identified", s.Ref)
				continue
			}
			in, ok := byID[strings.ToLower(s.Counter)]
			switch {
			case !ok:
				once("unknown\x00"+s.Counter, "counter %s (%s) is not in the instruments list: its calibration status is unknown", s.Counter, s.Ref)
			case s.Time.IsZero():
				once("notime\x00"+s.Counter, "%s has no time: whether counter %s was within its calibration (due %s) cannot be shown",
					s.Ref, s.Counter, in.CalibrationDue.UTC().Format(time.DateOnly))
			case !in.CalibrationValidOn(s.Time):
				once("due\x00"+s.Counter, "counter %s (serial %s) was past its calibration due date %s when %s was taken (%s)",
					in.ID, in.Serial, in.CalibrationDue.UTC().Format(time.DateOnly), s.Ref, s.Time.UTC().Format(time.DateOnly))
			}
		}
	}
}

// Designation writes the zone's designation the way ISO 14644-1:2015
// clause 4 writes it (from memory): "ISO Class 5; in operation; 0.3 µm,
// 0.5 µm", followed by the macroparticle descriptor when one is given. A
// grade target is written "EU GMP grade B; at rest; 0.5 µm, 5 µm".
func Designation(t Target, m *Macro) string {
	var b strings.Builder
	if t.Grade != "" {
		b.WriteString("EU GMP grade " + t.Grade)
	} else {
		b.WriteString("ISO Class " + FormatClass(t.Class))
	}
	state := t.State
	if state == "" {
		state = AtRest
	}
	b.WriteString("; " + strings.ReplaceAll(state, "-", " ") + "; ")
	for i, s := range t.Sizes {
		if i > 0 {
			b.WriteString(", ")
		}
		fmt.Fprintf(&b, "%s µm", FormatSize(s))
	}
	if m != nil {
		b.WriteString("; " + m.String())
	}
	return b.String()
}

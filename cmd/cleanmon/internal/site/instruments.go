package site

import (
	"fmt"
	"time"

	"cleanmon/classify"
	"cleanmon/collector"
)

// checkInstruments checks the counters' instrument identification: a
// calibration due date is a date (2006-01-02), and ids of the text kind
// hold no control characters.
func (d *nodeDecoder) checkInstruments(c *Config) {
	for i, k := range c.Counters {
		p := fmt.Sprintf("counters[%d]", i)
		if k.CalibrationDue != "" {
			if _, err := time.Parse(time.DateOnly, k.CalibrationDue); err != nil {
				d.add(p+".calibration_due", "%q is not a date such as 2026-09-30 (the last day the calibration is valid)", k.CalibrationDue)
			}
		}
		for field, v := range map[string]string{"model": k.Model, "serial": k.Serial} {
			if msg := collector.TextProblem(v, 256); msg != "" {
				d.add(p+"."+field, "%s", msg)
			}
		}
	}
}

// CalibrationDue is a counter's calibration due date (the last valid
// day, UTC), and false when the configuration gives none.
func CalibrationDue(k collector.Counter) (time.Time, bool) {
	if k.CalibrationDue == "" {
		return time.Time{}, false
	}
	t, err := time.Parse(time.DateOnly, k.CalibrationDue)
	return t, err == nil // Load refused any other value
}

// Instruments are the counters of a zone as a certification's instruments
// list: nil when none of them has a calibration due date configured (the
// report then says the calibration status is unknown), else every counter
// that has one. A counter of such a zone without a due date is left out,
// so a sample it drew is a departure: its calibration cannot be vouched
// for.
func (c *Config) Instruments(zone string) []classify.Instrument {
	var out []classify.Instrument
	for _, k := range c.Counters {
		due, ok := CalibrationDue(k)
		if k.Zone != zone || !ok {
			continue
		}
		out = append(out, classify.Instrument{ID: k.ID, Model: k.Model, Serial: k.Serial, CalibrationDue: due})
	}
	return out
}

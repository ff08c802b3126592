package collector

import (
	"encoding/csv"
	"fmt"
	"io"
	"strings"
	"time"

	"cleanmon/classify"
)

// ReadInstruments reads an instruments file for an offline certification:
// a header row naming `counter`, `serial` and `calibration_due` (a date,
// 2006-01-02, the last day the calibration is valid) and optionally
// `model`; then one row per particle counter. Blank lines and # comments
// are ignored. Counter ids are compared without regard to case, as sample
// files name them, so two rows differing only in case are refused. Errors
// are *SampleFileError naming file, line and column, and nothing is
// returned with them.
func ReadInstruments(r io.Reader, name string) ([]classify.Instrument, error) {
	fail := func(line int, field, format string, a ...any) error {
		return &SampleFileError{File: name, Line: line, Field: field, Msg: fmt.Sprintf(format, a...)}
	}
	cr := csv.NewReader(r)
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	rec0, err := cr.Read()
	if err == io.EOF {
		return nil, fail(0, "", "the file is empty: it needs a header row and at least one instrument")
	}
	if err != nil {
		return nil, csvFail(name, err)
	}
	hline, _ := cr.FieldPos(0)
	col := map[string]int{"counter": -1, "model": -1, "serial": -1, "calibration_due": -1}
	for i, h := range rec0 {
		key := strings.ToLower(strings.TrimSpace(h))
		if i == 0 {
			key = strings.TrimPrefix(key, "\ufeff")
		}
		at, known := col[key]
		switch {
		case !known:
			return nil, fail(hline, strings.TrimSpace(h), "unknown column (want counter, model, serial, calibration_due)")
		case at >= 0:
			return nil, fail(hline, key, "column appears twice")
		}
		col[key] = i
	}
	for _, req := range []string{"counter", "serial", "calibration_due"} {
		if col[req] < 0 {
			return nil, fail(hline, req, "required column is missing")
		}
	}
	var out []classify.Instrument
	first := map[string]int{} // folded id → line
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, csvFail(name, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) == 1 && strings.TrimSpace(rec[0]) == "" {
			continue
		}
		if len(rec) != len(rec0) {
			return nil, fail(line, "", "%d fields, the header has %d", len(rec), len(rec0))
		}
		in := classify.Instrument{ID: strings.TrimSpace(rec[col["counter"]]), Serial: strings.TrimSpace(rec[col["serial"]])}
		if m := col["model"]; m >= 0 {
			in.Model = strings.TrimSpace(rec[m])
		}
		switch {
		case in.ID == "":
			return nil, fail(line, "counter", "empty")
		case in.Serial == "":
			return nil, fail(line, "serial", "empty: the report identifies each counter by its serial number")
		}
		if prev, dup := first[strings.ToLower(in.ID)]; dup {
			return nil, fail(line, "counter", "%q is already listed on line %d (ids are compared without regard to case)", in.ID, prev)
		}
		first[strings.ToLower(in.ID)] = line
		raw := strings.TrimSpace(rec[col["calibration_due"]])
		due, err := time.Parse(time.DateOnly, raw)
		if err != nil {
			return nil, fail(line, "calibration_due", "%q is not a date such as 2026-12-31", raw)
		}
		in.CalibrationDue = due
		out = append(out, in)
	}
	if len(out) == 0 {
		return nil, fail(hline, "", "no instruments after the header")
	}
	return out, nil
}

package investigate

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"strings"
	"time"
)

// CSVError names the file, line and column of the first problem of a runs
// file. It matches ErrInput under errors.Is.
type CSVError struct {
	File   string
	Line   int
	Field  string // the column, as named in the header; empty for the line as a whole
	Reason string
}

// Error reads "runs.csv:4: end: 2026-03-02T05:00:00Z is not after start".
func (e *CSVError) Error() string {
	if e.Field == "" {
		return fmt.Sprintf("%s:%d: %s", e.File, e.Line, e.Reason)
	}
	return fmt.Sprintf("%s:%d: %s: %s", e.File, e.Line, e.Field, e.Reason)
}

// Unwrap makes a CSVError match ErrInput.
func (e *CSVError) Unwrap() error { return ErrInput }

// Columns of a runs file: id, zone and start are required, end, product
// and lot may be left out; an empty end is a run still going on.
var runColumns = map[string]bool{"id": true, "zone": true, "start": true, "end": false, "product": false, "lot": false}

// ReadRunsCSV reads production runs from a CSV file with a header row
// naming its columns (id, zone, start, end, product, lot, in any order).
// Times are RFC 3339. Blank lines and lines starting with # are skipped.
// The first problem is returned as a *CSVError naming file (name), line and
// column, and no run is returned with it.
func ReadRunsCSV(r io.Reader, name string) ([]Run, error) {
	cr := csv.NewReader(r)
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	fail := func(line int, field, format string, args ...any) error {
		return &CSVError{File: name, Line: line, Field: field, Reason: fmt.Sprintf(format, args...)}
	}
	header, err := cr.Read()
	if errors.Is(err, io.EOF) {
		return nil, fail(1, "", "empty file: a header row naming id, zone and start is needed")
	}
	if err != nil {
		return nil, csvReadError(name, err)
	}
	hline, _ := cr.FieldPos(0)
	col := map[string]int{}
	for i, h := range header {
		h = strings.ToLower(strings.TrimSpace(h))
		if _, ok := runColumns[h]; !ok {
			return nil, fail(hline, h, "unknown column (want id, zone, start, end, product, lot)")
		}
		if _, dup := col[h]; dup {
			return nil, fail(hline, h, "column named twice")
		}
		col[h] = i
	}
	for c, required := range runColumns {
		if _, ok := col[c]; required && !ok {
			return nil, fail(hline, c, "required column missing from the header")
		}
	}
	var runs []Run
	firstLine := map[string]int{}
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			return runs, nil
		}
		if err != nil {
			return nil, csvReadError(name, err)
		}
		line, _ := cr.FieldPos(0)
		run, err := runFromRecord(rec, col, line, fail)
		if err != nil {
			return nil, err
		}
		if prev, dup := firstLine[run.ID]; dup {
			return nil, fail(line, "id", "%q is already on line %d", run.ID, prev)
		}
		firstLine[run.ID] = line
		runs = append(runs, run)
	}
}

func runFromRecord(rec []string, col map[string]int, line int, fail func(int, string, string, ...any) error) (Run, error) {
	if len(rec) != len(col) {
		return Run{}, fail(line, "", "%d fields, the header has %d", len(rec), len(col))
	}
	cell := func(c string) string {
		if i, ok := col[c]; ok {
			return strings.TrimSpace(rec[i])
		}
		return ""
	}
	r := Run{ID: cell("id"), Zone: cell("zone"), Product: cell("product"), Lot: cell("lot")}
	if r.ID == "" {
		return Run{}, fail(line, "id", "empty")
	}
	if r.Zone == "" {
		return Run{}, fail(line, "zone", "empty")
	}
	var err error
	if r.Start, err = time.Parse(time.RFC3339, cell("start")); err != nil {
		return Run{}, fail(line, "start", "%q is not an RFC 3339 time", cell("start"))
	}
	if e := cell("end"); e != "" {
		if r.End, err = time.Parse(time.RFC3339, e); err != nil {
			return Run{}, fail(line, "end", "%q is not an RFC 3339 time", e)
		}
		if !r.End.After(r.Start) {
			return Run{}, fail(line, "end", "%s is not after start %s", e, cell("start"))
		}
	}
	return r, nil
}

// csvReadError turns encoding/csv's parse errors (an unclosed quote) into
// a CSVError with their line.
func csvReadError(name string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &CSVError{File: name, Line: pe.Line, Reason: pe.Err.Error()}
	}
	return fmt.Errorf("%s: %w", name, err)
}

package collector

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"cleanmon/classify"
)

// ErrSampleFile is wrapped by every error of ReadSamples.
var ErrSampleFile = errors.New("bad samples file")

// SampleFileError names where in a samples file a problem is: the file, the
// 1-based line and the column.
type SampleFileError struct {
	File  string
	Line  int
	Field string
	Msg   string
}

func (e *SampleFileError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	if e.Field != "" {
		fmt.Fprintf(&b, ": %s", e.Field)
	}
	fmt.Fprintf(&b, ": %s", e.Msg)
	return b.String()
}

// Unwrap lets errors.Is(err, ErrSampleFile) hold.
func (e *SampleFileError) Unwrap() error { return ErrSampleFile }

// SampleFileOptions say how to read a samples file.
type SampleFileOptions struct {
	Name         string    // file name for messages
	Sizes        []float64 // the considered sizes, ascending: a column for each must be present
	Differential bool      // counts are per channel (this size up to the next) rather than cumulative
}

// sampleColumns is where each column of a samples file is.
type sampleColumns struct {
	header                     []string
	line                       int
	loc, vol                   int
	time, sample, dur, counter int
	x, y                       int
	chanCol                    []int     // every size column, ascending by size
	chanSize                   []float64 // their sizes
	pick                       []int     // for each considered size, its index in chanCol
}

// sampleHeaderNames are the columns other than the size channels.
var sampleHeaderNames = []string{"location", "volume_l", "time", "sample", "duration_s", "counter", "x_m", "y_m"}

// ReadSamples reads a certification samples file: a header row naming
// `location`, `volume_l` and one column per channel size (`0.3um`,
// `0.5um`, `5um`), and optionally `time` (RFC 3339), `sample`,
// `duration_s`, `counter`, `x_m` and `y_m`; then one row per single sample
// volume with raw counts. Blank lines and lines starting with # are
// ignored. The file may hold more channels than the considered sizes:
// differential counts are summed over every channel at or above each
// considered size (all of them, so that particles in a channel between two
// considered sizes are not lost), cumulative counts are checked across all
// channels; the counts returned are cumulative and aligned with opt.Sizes.
// The first problem found is returned with file, line and column; nothing
// is returned with it, so a caller never works on half a file.
func ReadSamples(r io.Reader, opt SampleFileOptions) ([]classify.Sample, error) {
	fail := func(line int, field, format string, a ...any) error {
		return &SampleFileError{File: opt.Name, Line: line, Field: field, Msg: fmt.Sprintf(format, a...)}
	}
	cr := csv.NewReader(r)
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	cr.ReuseRecord = true

	rec0, err := cr.Read()
	if err == io.EOF {
		return nil, fail(0, "", "the file is empty: it needs a header row and at least one sample")
	}
	if err != nil {
		return nil, csvFail(opt.Name, err)
	}
	hline, _ := cr.FieldPos(0)
	// The reader reuses its record slice: keep a copy of the header.
	cols, err := sampleHeader(append([]string(nil), rec0...), hline, opt, fail)
	if err != nil {
		return nil, err
	}
	var out []classify.Sample
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, csvFail(opt.Name, err)
		}
		line, _ := cr.FieldPos(0)
		if len(rec) == 1 && strings.TrimSpace(rec[0]) == "" {
			continue
		}
		if len(rec) != len(cols.header) {
			return nil, fail(line, "", "%d fields, the header has %d", len(rec), len(cols.header))
		}
		s, err := sampleRow(rec, line, cols, opt, fail)
		if err != nil {
			return nil, err
		}
		out = append(out, s)
	}
	if len(out) == 0 {
		return nil, fail(hline, "", "no samples after the header")
	}
	return out, nil
}

type failFunc func(line int, field, format string, a ...any) error

func sampleHeader(header []string, hline int, opt SampleFileOptions, fail failFunc) (sampleColumns, error) {
	c := sampleColumns{header: header, line: hline, loc: -1, vol: -1, time: -1, sample: -1, dur: -1, counter: -1, x: -1, y: -1}
	named := map[string]*int{"location": &c.loc, "volume_l": &c.vol, "time": &c.time, "sample": &c.sample,
		"duration_s": &c.dur, "counter": &c.counter, "x_m": &c.x, "y_m": &c.y}
	seen := map[string]bool{}
	type channel struct {
		col  int
		size float64
	}
	var chans []channel
	for i, h := range header {
		name := strings.TrimSpace(h)
		if i == 0 {
			name = strings.TrimPrefix(name, "\ufeff") // spreadsheets add a byte-order mark
		}
		key := strings.ToLower(name)
		if key == "" {
			return c, fail(hline, fmt.Sprintf("column %d", i+1), "empty column name")
		}
		if p, ok := named[key]; ok {
			*p = i
		} else {
			sz, err := classify.ParseSize(key)
			switch {
			case err != nil && key[0] >= '0' && key[0] <= '9':
				return c, fail(hline, name, "size column: %v", err)
			case err != nil:
				return c, fail(hline, name, "unknown column (want %s and size columns such as 0.5um)", strings.Join(sampleHeaderNames, ", "))
			}
			key = classify.FormatSize(sz) + "um"
			chans = append(chans, channel{i, sz})
		}
		if seen[key] {
			return c, fail(hline, name, "column appears twice")
		}
		seen[key] = true
	}
	for _, req := range []string{"location", "volume_l"} {
		if *named[req] < 0 {
			return c, fail(hline, req, "required column is missing")
		}
	}
	if (c.x < 0) != (c.y < 0) {
		return c, fail(hline, "x_m", "x_m and y_m come together: give both or neither")
	}
	sort.Slice(chans, func(i, j int) bool { return chans[i].size < chans[j].size })
	for _, ch := range chans {
		c.chanCol = append(c.chanCol, ch.col)
		c.chanSize = append(c.chanSize, ch.size)
	}
	for _, s := range opt.Sizes {
		j := slices.Index(c.chanSize, s)
		if j < 0 {
			return c, fail(hline, classify.FormatSize(s)+"um", "column for a considered size is missing (the file has %s)", sizeList(c.chanSize))
		}
		c.pick = append(c.pick, j)
	}
	return c, nil
}

func sampleRow(rec []string, line int, c sampleColumns, opt SampleFileOptions, fail failFunc) (classify.Sample, error) {
	s := classify.Sample{Ref: fmt.Sprintf("%s line %d", opt.Name, line)}
	s.Location = strings.TrimSpace(rec[c.loc])
	if s.Location == "" {
		return s, fail(line, "location", "empty")
	}
	v, err := strconv.ParseFloat(strings.TrimSpace(rec[c.vol]), 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return s, fail(line, "volume_l", "%q is not a number", rec[c.vol])
	}
	if v <= 0 {
		return s, fail(line, "volume_l", "%v L: the sampled volume must be positive", v)
	}
	s.VolumeL = v
	if c.time >= 0 {
		if ts := strings.TrimSpace(rec[c.time]); ts != "" {
			tm, err := time.Parse(time.RFC3339, ts)
			if err != nil {
				return s, fail(line, "time", "%q is not an RFC 3339 time", ts)
			}
			s.Time = tm
		}
	}
	if c.sample >= 0 {
		s.SampleID = strings.TrimSpace(rec[c.sample])
		if s.SampleID != "" {
			s.Ref += " (sample " + s.SampleID + ")"
		}
	}
	if c.counter >= 0 {
		s.Counter = strings.TrimSpace(rec[c.counter])
	}
	if c.dur >= 0 {
		if raw := strings.TrimSpace(rec[c.dur]); raw != "" {
			d, err := positive(raw)
			if err != nil {
				return s, fail(line, "duration_s", "%q: %v", raw, err)
			}
			s.DurationS = d
		}
	}
	if c.x >= 0 {
		x, errX := coordinate(rec[c.x])
		y, errY := coordinate(rec[c.y])
		switch {
		case errX != nil:
			return s, fail(line, "x_m", "%q: %v", rec[c.x], errX)
		case errY != nil:
			return s, fail(line, "y_m", "%q: %v", rec[c.y], errY)
		}
		s.XM, s.YM = x, y
		if (x == nil) != (y == nil) {
			return s, fail(line, "x_m", "give both x_m and y_m or neither")
		}
	}
	all := make([]uint64, len(c.chanCol))
	for j, col := range c.chanCol {
		raw := strings.TrimSpace(rec[col])
		n, err := strconv.ParseUint(raw, 10, 64)
		if err != nil {
			what := "is not a whole number of particles"
			if strings.HasPrefix(raw, "-") {
				what = "is negative: counts cannot be"
			}
			return s, fail(line, c.header[col], "%q %s", raw, what)
		}
		if n > 1<<53 {
			return s, fail(line, c.header[col], "%d is beyond any counter's range", n)
		}
		all[j] = n
	}
	if opt.Differential {
		all = classify.CumulativeFromDifferential(all)
		if all[0] > 1<<53 {
			return s, fail(line, c.header[c.chanCol[0]], "the channels sum to %d, beyond any counter's range", all[0])
		}
	} else if j, bad := classify.CheckCumulative(all); bad {
		return s, fail(line, c.header[c.chanCol[j]], "cumulative count %d is above the %d at the smaller size %s µm (use --differential if counts are per channel)",
			all[j], all[j-1], classify.FormatSize(c.chanSize[j-1]))
	}
	s.Counts = make([]uint64, len(c.pick))
	for i, j := range c.pick {
		s.Counts[i] = all[j]
	}
	return s, nil
}

// positive reads a finite number greater than zero.
func positive(raw string) (float64, error) {
	v, err := strconv.ParseFloat(strings.TrimSpace(raw), 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, errors.New("not a number")
	}
	if v <= 0 {
		return 0, errors.New("must be positive")
	}
	return v, nil
}

// coordinate reads a position in metres; an empty cell is no position.
func coordinate(raw string) (*float64, error) {
	t := strings.TrimSpace(raw)
	if t == "" {
		return nil, nil
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return nil, errors.New("not a position in metres")
	}
	if v < 0 {
		return nil, errors.New("positions are measured from a corner of the zone and cannot be negative")
	}
	return &v, nil
}

func csvFail(name string, err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return &SampleFileError{File: name, Line: pe.Line, Field: fmt.Sprintf("column %d", pe.Column), Msg: pe.Err.Error()}
	}
	return &SampleFileError{File: name, Msg: err.Error()}
}

func sizeList(s []float64) string {
	parts := make([]string, len(s))
	for i, v := range s {
		parts[i] = classify.FormatSize(v)
	}
	return strings.Join(parts, ",")
}

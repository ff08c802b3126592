package collector

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
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
	Sizes        []float64 // the considered sizes, ascending: exactly these size columns must be present
	Differential bool      // counts are per channel (this size up to the next) rather than cumulative
}

// ReadSamples reads a certification samples file: a header row naming
// `location`, `volume_l`, one column per size (`0.3um`, `0.5um`, `5um`),
// and optionally `time` (RFC 3339) and `sample`; then one row per single
// sample volume with raw counts. Blank lines and lines starting with # are
// ignored. Counts are returned cumulative and aligned with opt.Sizes.
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
	// The reader reuses its record slice: keep a copy of the header.
	header := append([]string(nil), rec0...)
	hline, _ := cr.FieldPos(0)
	col := map[string]int{}
	sizeCol := make([]int, len(opt.Sizes))
	for i := range sizeCol {
		sizeCol[i] = -1
	}
	timeCol, sampleCol := -1, -1
	for i, h := range header {
		name := strings.TrimSpace(h)
		if i == 0 {
			name = strings.TrimPrefix(name, "\ufeff") // spreadsheets add a byte-order mark
		}
		key := strings.ToLower(name)
		if key == "" {
			return nil, fail(hline, fmt.Sprintf("column %d", i+1), "empty column name")
		}
		switch key {
		case "location", "volume_l", "time", "sample":
		default:
			sz, err := classify.ParseSize(key)
			if err != nil {
				return nil, fail(hline, name, "unknown column (want location, volume_l, time, sample and size columns such as 0.5um)")
			}
			key = classify.FormatSize(sz) + "um"
			found := false
			for j, s := range opt.Sizes {
				if s == sz {
					sizeCol[j] = i
					found = true
				}
			}
			if !found {
				return nil, fail(hline, name, "size %s µm is not among the considered sizes %s", classify.FormatSize(sz), sizeList(opt.Sizes))
			}
		}
		if _, dup := col[key]; dup {
			return nil, fail(hline, name, "column appears twice")
		}
		col[key] = i
		switch key {
		case "time":
			timeCol = i
		case "sample":
			sampleCol = i
		}
	}
	for _, req := range []string{"location", "volume_l"} {
		if _, ok := col[req]; !ok {
			return nil, fail(hline, req, "required column is missing")
		}
	}
	for j, c := range sizeCol {
		if c < 0 {
			return nil, fail(hline, classify.FormatSize(opt.Sizes[j])+"um", "column for a considered size is missing")
		}
	}
	locCol, volCol := col["location"], col["volume_l"]

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
		if len(rec) != len(header) {
			return nil, fail(line, "", "%d fields, the header has %d", len(rec), len(header))
		}
		s := classify.Sample{Ref: fmt.Sprintf("%s line %d", opt.Name, line)}
		s.Location = strings.TrimSpace(rec[locCol])
		if s.Location == "" {
			return nil, fail(line, "location", "empty")
		}
		v, err := strconv.ParseFloat(strings.TrimSpace(rec[volCol]), 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fail(line, "volume_l", "%q is not a number", rec[volCol])
		}
		if v <= 0 {
			return nil, fail(line, "volume_l", "%v L: the sampled volume must be positive", v)
		}
		s.VolumeL = v
		if timeCol >= 0 {
			if ts := strings.TrimSpace(rec[timeCol]); ts != "" {
				tm, err := time.Parse(time.RFC3339, ts)
				if err != nil {
					return nil, fail(line, "time", "%q is not an RFC 3339 time", ts)
				}
				s.Time = tm
			}
		}
		if sampleCol >= 0 {
			s.Ref += " (sample " + strings.TrimSpace(rec[sampleCol]) + ")"
		}
		counts := make([]uint64, len(opt.Sizes))
		for j, c := range sizeCol {
			raw := strings.TrimSpace(rec[c])
			n, err := strconv.ParseUint(raw, 10, 64)
			if err != nil {
				what := "is not a whole number of particles"
				if strings.HasPrefix(raw, "-") {
					what = "is negative: counts cannot be"
				}
				return nil, fail(line, header[c], "%q %s", raw, what)
			}
			if n > 1<<53 {
				return nil, fail(line, header[c], "%d is beyond any counter's range", n)
			}
			counts[j] = n
		}
		if opt.Differential {
			counts = classify.CumulativeFromDifferential(counts)
		} else if j, bad := classify.CheckCumulative(counts); bad {
			return nil, fail(line, header[sizeCol[j]], "cumulative count %d is above the %d at the smaller size %s µm (use --differential if counts are per channel)",
				counts[j], counts[j-1], classify.FormatSize(opt.Sizes[j-1]))
		}
		s.Counts = counts
		out = append(out, s)
	}
	if len(out) == 0 {
		return nil, fail(hline, "", "no samples after the header")
	}
	return out, nil
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

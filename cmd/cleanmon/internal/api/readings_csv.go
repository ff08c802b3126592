package api

import (
	"bufio"
	"fmt"
	"math"
	"net/http"
	"slices"
	"strconv"
	"strings"
	"time"

	"cleanmon/classify"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
)

// The readings route answers format=csv with a table a LIMS or a
// spreadsheet reads as it is: a header row, one row per reading (or per
// rolled-up row), times in RFC 3339 UTC, and one column per channel size
// found in the range, so that a counter whose channels differ from
// another's leaves the cells of the sizes it does not have empty. The
// sizes are found by a first pass over the range: a header written from
// the first readings only could not hold a size met later.

// wantCSV reads format: "" or "json" for the JSON array, "csv" for CSV.
func wantCSV(w http.ResponseWriter, r *http.Request) (csv, ok bool) {
	switch f := r.URL.Query().Get("format"); f {
	case "", "json":
		return false, true
	case "csv":
		return true, true
	default:
		httpx.WriteFieldError(w, "format", fmt.Sprintf("%q is not json or csv", f))
		return false, false
	}
}

// csvStream writes CSV rows through a buffer; the header goes out with the
// status line, before the first row.
type csvStream struct {
	w      http.ResponseWriter
	bw     *bufio.Writer
	header string
	buf    []byte
	rows   int
	begun  bool
}

func newCSVStream(w http.ResponseWriter) *csvStream { return &csvStream{w: w} }

func (cs *csvStream) begin() {
	cs.begun = true
	cs.w.Header().Set("Content-Type", "text/csv; charset=utf-8")
	cs.w.Header().Set("Cache-Control", "no-store")
	cs.w.WriteHeader(http.StatusOK)
	cs.bw = bufio.NewWriterSize(cs.w, 64<<10)
	cs.bw.WriteString(cs.header)
}

// Row writes one line that appendRow renders (without its line end).
func (cs *csvStream) Row(appendRow func([]byte) []byte) error {
	if !cs.begun {
		cs.begin()
	}
	cs.rows++
	cs.buf = append(appendRow(cs.buf[:0]), '\r', '\n')
	_, err := cs.bw.Write(cs.buf)
	return err
}

// Rows is the number of rows written so far.
func (cs *csvStream) Rows() int { return cs.rows }

// End flushes; an empty range is the header alone.
func (cs *csvStream) End() {
	if !cs.begun {
		cs.begin()
	}
	cs.bw.Flush()
}

// Fail is an error answer before the first row, else a cut connection.
func (cs *csvStream) Fail(err error) {
	if !cs.begun {
		Errors.Write(cs.w, "reading the store: ", err)
		return
	}
	cs.bw.Flush()
	panic(http.ErrAbortHandler)
}

// csvHeader is a header row (RFC 4180 line end) of fixed columns, then
// each prefix followed by each size.
func csvHeader(fixed []string, prefixes []string, sizes []float64) string {
	cols := slices.Clone(fixed)
	for _, p := range prefixes {
		for _, sz := range sizes {
			cols = append(cols, p+classify.FormatSize(sz))
		}
	}
	return strings.Join(cols, ",") + "\r\n"
}

// appendCSVText writes a cell, quoted (RFC 4180) when it holds a comma,
// a quote or a line end.
func appendCSVText(b []byte, s string) []byte {
	if !strings.ContainsAny(s, ",\"\r\n") {
		return append(b, s...)
	}
	b = append(b, '"')
	b = append(b, strings.ReplaceAll(s, `"`, `""`)...)
	return append(b, '"')
}

// appendCSVFloat writes a number in plain decimals; NaN and infinities,
// which no spreadsheet reads, leave the cell empty.
func appendCSVFloat(b []byte, f float64) []byte {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return b
	}
	return strconv.AppendFloat(b, f, 'f', -1, 64)
}

func appendCSVTime(b []byte, t time.Time) []byte {
	return t.UTC().AppendFormat(b, time.RFC3339Nano)
}

// rawSizes is every channel size of the counters' readings in [from, to),
// ascending.
func (s *Server) rawSizes(counters []counterRef, from, to time.Time) ([]float64, error) {
	var all, last []float64
	for i := range counters {
		err := s.store.StreamReadings(counters[i].id, from, to, func(rd *store.Reading) error {
			if !slices.Equal(last, rd.Sizes) {
				last = slices.Clone(rd.Sizes)
				all = append(all, last...)
			}
			return nil
		})
		if err != nil {
			return nil, err
		}
	}
	slices.Sort(all)
	return slices.Compact(all), nil
}

var rawCSVColumns = []string{"time", "counter", "location", "volume_l", "flow_lpm", "sample_seconds", "status", "mode"}

// streamRawCSV writes the readings as CSV: the fixed columns, then the
// counts as received per size (count_<µm>), then the cumulative
// concentration per size (per_m3_<µm>).
func (s *Server) streamRawCSV(r *http.Request, cs *csvStream, counters []counterRef, from, to time.Time) error {
	sizes, err := s.rawSizes(counters, from, to)
	if err != nil {
		return err
	}
	cs.header = csvHeader(rawCSVColumns, []string{"count_", "per_m3_"}, sizes)
	cells := make([]int, 0, 16)
	return s.streamRaw(r, cs, counters, from, to, func(b []byte, rd *store.Reading, c *counterRef, _ [][]byte) []byte {
		b = appendCSVTime(b, rd.Time)
		b = append(b, ',')
		b = appendCSVText(b, c.id)
		b = append(b, ',')
		b = appendCSVText(b, c.location)
		b = append(b, ',')
		b = appendCSVFloat(b, rd.VolumeL)
		b = append(b, ',')
		if rd.FlowLPM != 0 {
			b = appendCSVFloat(b, rd.FlowLPM)
		}
		b = append(b, ',')
		if rd.SampleSeconds != 0 {
			b = appendCSVFloat(b, rd.SampleSeconds)
		}
		b = append(b, ',')
		b = append(b, rd.Status...)
		if rd.Differential {
			b = append(b, ",differential"...)
		} else {
			b = append(b, ",cumulative"...)
		}
		cells = sizeCells(cells[:0], sizes, rd.Sizes)
		for _, j := range cells {
			b = append(b, ',')
			if j >= 0 {
				b = strconv.AppendUint(b, rd.Counts[j], 10)
			}
		}
		per := rd.PerM3()
		for _, j := range cells {
			b = append(b, ',')
			if j >= 0 {
				b = appendCSVFloat(b, per[j])
			}
		}
		return b
	})
}

// sizeCells maps each header size to its channel in have, −1 for none.
func sizeCells(out []int, header, have []float64) []int {
	for _, sz := range header {
		out = append(out, slices.Index(have, sz))
	}
	return out
}

// rollupSizes is every size of the counters' rollups in [from, to).
func (s *Server) rollupSizes(counters []counterRef, source time.Duration, from, to time.Time) ([]float64, error) {
	var all, last []float64
	for i := range counters {
		err := s.store.ScanRollups(counters[i].id, source, from, to, func(ru store.Rollup) error {
			if !slices.Equal(last, ru.Sizes) {
				last = slices.Clone(ru.Sizes)
				all = append(all, last...)
			}
			return nil
		})
		if err != nil {
			return nil, err
		}
	}
	slices.Sort(all)
	return slices.Compact(all), nil
}

var rollupCSVColumns = []string{"time", "step", "counter", "location", "samples"}

// streamRollupsCSV writes rolled-up rows as CSV: the fixed columns, then
// the mean and the max cumulative concentration per size.
func (s *Server) streamRollupsCSV(r *http.Request, cs *csvStream, counters []counterRef, step, source time.Duration, from, to time.Time) error {
	sizes, err := s.rollupSizes(counters, source, from, to)
	if err != nil {
		return err
	}
	cs.header = csvHeader(rollupCSVColumns, []string{"mean_per_m3_", "max_per_m3_"}, sizes)
	cells := make([]int, 0, 16)
	return s.streamRollups(r, cs, counters, step, source, from, to, func(b []byte, g *rollupAgg, stepName string) []byte {
		b = appendCSVTime(b, g.start)
		b = append(b, ',')
		b = append(b, stepName...)
		b = append(b, ',')
		b = appendCSVText(b, g.ref.id)
		b = append(b, ',')
		b = appendCSVText(b, g.ref.location)
		b = append(b, ',')
		b = strconv.AppendInt(b, int64(g.samples), 10)
		cells = sizeCells(cells[:0], sizes, g.sizes)
		for _, j := range cells {
			b = append(b, ',')
			if j >= 0 && g.n[j] > 0 {
				b = appendCSVFloat(b, g.sum[j]/float64(g.n[j]))
			}
		}
		for _, j := range cells {
			b = append(b, ',')
			if j >= 0 && g.seen[j] {
				b = appendCSVFloat(b, g.max[j])
			}
		}
		return b
	})
}

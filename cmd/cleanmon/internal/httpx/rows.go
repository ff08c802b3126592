package httpx

import (
	"bufio"
	"math"
	"net/http"
	"slices"
	"strconv"
	"time"

	"cleanmon/classify"
)

// RowStream writes a JSON array one element at a time through a buffer,
// so that a large answer never sits in memory. The status line goes out
// with the first row, so an error before it can still be an ordinary
// error answer.
type RowStream struct {
	w    http.ResponseWriter
	bw   *bufio.Writer
	buf  []byte
	rows int
	errs Table
}

// NewRowStream starts a stream on w; errs gives the status of an error
// met before the first row.
func NewRowStream(w http.ResponseWriter, errs Table) *RowStream {
	return &RowStream{w: w, errs: errs}
}

func (rs *RowStream) begin() {
	rs.w.Header().Set("Content-Type", "application/json")
	rs.w.Header().Set("Cache-Control", "no-store")
	rs.w.WriteHeader(http.StatusOK)
	rs.bw = bufio.NewWriterSize(rs.w, 64<<10)
	rs.bw.WriteByte('[')
}

// Row writes one element that appendRow renders.
func (rs *RowStream) Row(appendRow func([]byte) []byte) error {
	if rs.rows == 0 {
		rs.begin()
	} else if err := rs.bw.WriteByte(','); err != nil {
		return err
	}
	rs.rows++
	rs.buf = append(appendRow(rs.buf[:0]), '\n')
	_, err := rs.bw.Write(rs.buf)
	return err
}

// Rows is the number of rows written so far.
func (rs *RowStream) Rows() int { return rs.rows }

// End closes the array (an empty one when no row came).
func (rs *RowStream) End() {
	if rs.rows == 0 {
		rs.begin()
	}
	rs.bw.WriteString("]\n")
	rs.bw.Flush()
}

// Fail ends a stream that broke: before the first row it is an error
// answer; after it the connection is cut, so the client sees a broken
// answer rather than a complete-looking short one.
func (rs *RowStream) Fail(err error) {
	if rs.rows == 0 {
		rs.errs.Write(rs.w, "reading the store: ", err)
		return
	}
	rs.bw.Flush()
	panic(http.ErrAbortHandler)
}

// The rows of streamed answers are written by hand rather than through
// encoding/json: a year of one location is half a million rows, and
// reflection over per-row maps made that answer several times slower than
// the store can read it. The api package's tests check the shapes against
// encoding/json.

// SizeKeys caches the JSON keys (`"0.5":`) of a counter's channel sizes.
type SizeKeys struct {
	sizes []float64
	keys  [][]byte
}

// Get returns the keys of sizes, rebuilt only when sizes change.
func (k *SizeKeys) Get(sizes []float64) [][]byte {
	if k.keys == nil || !slices.Equal(k.sizes, sizes) {
		k.sizes = append(k.sizes[:0], sizes...)
		k.keys = k.keys[:0]
		for _, s := range sizes {
			k.keys = append(k.keys, []byte(strconv.Quote(classify.FormatSize(s))+":"))
		}
	}
	return k.keys
}

// AppendFloat writes a float as encoding/json does; a value JSON cannot
// hold (NaN, ±Inf) becomes null rather than a broken document.
func AppendFloat(b []byte, f float64) []byte {
	if f == 0 && !math.Signbit(f) {
		return append(b, '0') // a clean room's usual count, written without the float machinery
	}
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return append(b, "null"...)
	}
	abs := math.Abs(f)
	format := byte('f')
	if abs != 0 && (abs < 1e-6 || abs >= 1e21) {
		format = 'e'
	}
	b = strconv.AppendFloat(b, f, format, -1, 64)
	if format == 'e' {
		// e-09 becomes e-9, as encoding/json writes it
		n := len(b)
		if n >= 4 && b[n-4] == 'e' && b[n-3] == '-' && b[n-2] == '0' {
			b[n-2] = b[n-1]
			b = b[:n-1]
		}
	}
	return b
}

// AppendTime writes t as a JSON string in UTC, RFC 3339 with nanoseconds.
func AppendTime(b []byte, t time.Time) []byte {
	b = append(b, '"')
	b = t.UTC().AppendFormat(b, time.RFC3339Nano)
	return append(b, '"')
}

// AppendSizeMap writes {"0.5":v0,"1":v1,...} with keys from SizeKeys.
func AppendSizeMap(b []byte, keys [][]byte, v []float64) []byte {
	b = append(b, '{')
	for i, k := range keys {
		if i > 0 {
			b = append(b, ',')
		}
		b = append(b, k...)
		b = AppendFloat(b, v[i])
	}
	return append(b, '}')
}

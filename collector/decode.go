package collector

import (
	"bufio"
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"strconv"
	"strings"
)

// bodyFormat is how a request body is laid out.
type bodyFormat int

const (
	formatJSON   bodyFormat = iota // one JSON object or one JSON array of objects
	formatNDJSON                   // one JSON object per line, blank lines skipped
)

// formatOf maps a Content-Type to a body format. An absent Content-Type is
// read as JSON: small embedded HTTP clients often send none.
func formatOf(contentType string) (bodyFormat, bool) {
	if contentType == "" {
		return formatJSON, true
	}
	mt, _, err := mime.ParseMediaType(contentType)
	if err != nil {
		return 0, false
	}
	switch mt {
	case "application/json":
		return formatJSON, true
	case "application/x-ndjson", "application/ndjson":
		return formatNDJSON, true
	}
	return 0, false
}

// resetter is a raw element type that can be emptied for reuse.
type resetter[T any] interface {
	*T
	reset()
}

// decodeBody streams the elements of a body into each, one at a time and
// in order, stopping at the first fault. It returns how many elements it
// saw (decoded or not) and an *InputError, or an error wrapping
// ErrTooLarge, or the reader's error.
func decodeBody[T any, P resetter[T]](r io.Reader, f bodyFormat, maxLine int, each func(i int, v P) *InputError) (int, error) {
	var v T
	if f == formatNDJSON {
		return decodeNDJSON(r, maxLine, P(&v), each)
	}
	br := bufio.NewReaderSize(r, 32<<10)
	first, err := skipSpace(br)
	if err == io.EOF {
		return 0, inputErr(0, "", "empty body: send a JSON object, a JSON array, or NDJSON lines with Content-Type application/x-ndjson")
	}
	if err != nil {
		return 0, decodeErr(err, 0, 0)
	}
	dec := json.NewDecoder(br)
	dec.DisallowUnknownFields()
	switch first {
	case '{':
		P(&v).reset()
		if err := dec.Decode(P(&v)); err != nil {
			return 1, decodeErr(err, 0, 0)
		}
		if ie := each(0, P(&v)); ie != nil {
			return 1, ie
		}
		if err := expectEOF(dec); err != nil {
			return 1, decodeErr(err, 0, 0)
		}
		return 1, nil
	case '[':
		if _, err := dec.Token(); err != nil {
			return 0, decodeErr(err, 0, 0)
		}
		i := 0
		for dec.More() {
			P(&v).reset()
			if err := dec.Decode(P(&v)); err != nil {
				return i + 1, decodeErr(err, i, 0)
			}
			if ie := each(i, P(&v)); ie != nil {
				return i + 1, ie
			}
			i++
		}
		last := max(i-1, 0)
		switch _, err := dec.Token(); {
		case err == io.EOF:
			return i, inputErr(i, "", "truncated JSON: the array is not closed")
		case err != nil:
			return i, decodeErr(err, i, 0)
		}
		if err := expectEOF(dec); err != nil {
			return i, decodeErr(err, last, 0)
		}
		return i, nil
	default:
		return 0, inputErr(0, "", "the body must be a JSON object or a JSON array of objects (for NDJSON send Content-Type application/x-ndjson)")
	}
}

// errTrailing marks data after the one JSON value a body may hold.
var errTrailing = errors.New("unexpected data after the JSON value")

// expectEOF checks that nothing but white space follows the value.
func expectEOF(dec *json.Decoder) error {
	_, err := dec.Token()
	switch {
	case err == io.EOF:
		return nil
	case err == nil:
		return errTrailing
	}
	var mbe *limitError
	if errors.As(err, &mbe) {
		return err
	}
	return errTrailing
}

// decodeNDJSON reads one object per line. Each line gets its own decoder
// so that a line holds exactly one value and errors name the line.
func decodeNDJSON[T any, P resetter[T]](r io.Reader, maxLine int, v P, each func(i int, v P) *InputError) (int, error) {
	// The scanner hands out the unfinished last line when the reader
	// fails, so a body cut off at the size limit would look truncated;
	// the recorder tells the two apart.
	rec := &readRecorder{r: r}
	sc := bufio.NewScanner(rec)
	sc.Buffer(make([]byte, 0, 64<<10), maxLine)
	var lr bytes.Reader
	i, line := 0, 0
	fail := func(err error) (int, error) {
		var mbe *limitError
		if errors.As(rec.err, &mbe) {
			return i + 1, decodeErr(rec.err, i, line)
		}
		return i + 1, err
	}
	for sc.Scan() {
		line++
		b := sc.Bytes()
		if isBlank(b) {
			continue
		}
		lr.Reset(b)
		dec := json.NewDecoder(&lr)
		dec.DisallowUnknownFields()
		v.reset()
		if err := dec.Decode(v); err != nil {
			return fail(decodeErr(err, i, line))
		}
		if rest := b[dec.InputOffset():]; !isBlank(rest) {
			ie := inputErr(i, "", "more than one JSON value on the line: NDJSON takes one object per line")
			ie.Line = line
			return fail(ie)
		}
		if ie := each(i, v); ie != nil {
			ie.Line = line
			return fail(ie)
		}
		i++
	}
	if err := sc.Err(); err != nil {
		if errors.Is(err, bufio.ErrTooLong) {
			return i, fmt.Errorf("%w: line %d is longer than %d bytes", ErrTooLarge, line+1, maxLine)
		}
		return i, decodeErr(err, i, line+1)
	}
	if i == 0 {
		return 0, inputErr(0, "", "empty body: no NDJSON lines")
	}
	return i, nil
}

// readRecorder remembers the first error of its reader other than EOF.
type readRecorder struct {
	r   io.Reader
	err error
}

func (rr *readRecorder) Read(p []byte) (int, error) {
	n, err := rr.r.Read(p)
	if err != nil && err != io.EOF && rr.err == nil {
		rr.err = err
	}
	return n, err
}

func isBlank(b []byte) bool {
	for _, c := range b {
		if c != ' ' && c != '\t' && c != '\r' && c != '\n' {
			return false
		}
	}
	return true
}

// skipSpace consumes leading JSON white space and returns the next byte
// without consuming it.
func skipSpace(br *bufio.Reader) (byte, error) {
	for {
		c, err := br.ReadByte()
		if err != nil {
			return 0, err
		}
		if c != ' ' && c != '\t' && c != '\r' && c != '\n' {
			return c, br.UnreadByte()
		}
	}
}

// decodeErr turns a decoding failure of element i (on NDJSON line line, or
// 0) into an *InputError naming the field where the decoder knows it, or
// into ErrTooLarge.
func decodeErr(err error, i, line int) error {
	var mbe *limitError
	if errors.As(err, &mbe) {
		return fmt.Errorf("%w: the limit is %d bytes", ErrTooLarge, mbe.Limit)
	}
	ie := &InputError{Index: i, Line: line}
	var syn *json.SyntaxError
	var ute *json.UnmarshalTypeError
	switch {
	case errors.As(err, &syn):
		at := "byte " + strconv.FormatInt(syn.Offset, 10)
		if line > 0 {
			at += " of the line"
		}
		ie.Msg = "malformed JSON at " + at + ": " + strings.TrimPrefix(syn.Error(), "json: ")
	case errors.As(err, &ute):
		if ute.Field == "" {
			ie.Msg = "each element must be a JSON object, not " + describeValue(ute.Value)
		} else {
			ie.Field = ute.Field
			ie.Msg = "must be " + describeType(ute.Type.String()) + ", not " + describeValue(ute.Value)
		}
	case errors.Is(err, io.ErrUnexpectedEOF):
		ie.Msg = "truncated JSON: the body ends inside a value"
	case errors.Is(err, errTrailing):
		ie.Msg = errTrailing.Error() + ": send one object, one array, or NDJSON"
	case strings.HasPrefix(err.Error(), `json: unknown field "`):
		name, qerr := strconv.Unquote(strings.TrimPrefix(err.Error(), "json: unknown field "))
		if qerr != nil {
			name = strings.TrimPrefix(err.Error(), "json: unknown field ")
		}
		ie.Field = name
		ie.Msg = "unknown field"
	default:
		ie.Msg = "reading the body: " + err.Error()
	}
	return ie
}

func describeValue(v string) string {
	switch v {
	case "string":
		return "a string"
	case "bool":
		return "a boolean"
	case "array":
		return "an array"
	case "object":
		return "an object"
	case "number":
		return "a number"
	}
	if n, ok := strings.CutPrefix(v, "number "); ok {
		return n + ", which is out of range"
	}
	return v
}

func describeType(t string) string {
	switch {
	case strings.Contains(t, "float"):
		return "a finite number"
	case t == "string":
		return "a string"
	case strings.HasPrefix(t, "map"):
		return "an object"
	case strings.Contains(t, "Raw"):
		return "an object"
	}
	return t
}

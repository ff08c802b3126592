package collector

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"mime"
	"reflect"
	"strconv"
	"strings"
	"sync"

	"github.com/go-json-experiment/json"
	"github.com/go-json-experiment/json/jsontext"
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

// IsNDJSON reports whether a Content-Type names NDJSON, and whether the
// type is one the ingest routes take at all (JSON, NDJSON, or none).
func IsNDJSON(contentType string) (ndjson, ok bool) {
	f, ok := formatOf(contentType)
	return f == formatNDJSON, ok
}

// strictOptions are the decoding rules of every body: a key given twice,
// a key that matches a field only when case is ignored, an unknown key
// and invalid UTF-8 are all refused. A sender whose "pa" appears twice
// would otherwise have the last one win, silently.
var strictOptions = json.JoinOptions(
	json.RejectUnknownMembers(true),
	json.MatchCaseInsensitiveNames(false),
	jsontext.AllowDuplicateNames(false),
	jsontext.AllowInvalidUTF8(false),
)

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
	return decodeStream(r, f == formatNDJSON, maxLine, &v, P(&v).reset, func(i int, x *T) *InputError { return each(i, P(x)) })
}

// DecodeElements streams the elements of a request body (one JSON object,
// a JSON array of objects, or with ndjson one object per line) into a
// fresh *T each and hands them to each, in order, stopping at the first
// fault. Decoding is strict: a duplicate, case-variant or unknown key is
// refused naming the key and the element. It returns how many elements
// it saw and an *InputError (naming index, field and rule), an error
// wrapping ErrTooLarge when the reader is an http.MaxBytesReader that hit
// its limit, or the reader's error. maxLine bounds an NDJSON line.
// A new kind of sample (environment) decodes through it.
func DecodeElements[T any](r io.Reader, ndjson bool, maxLine int, each func(i int, v *T) *InputError) (int, error) {
	var v T
	return decodeStream(r, ndjson, maxLine, &v, func() { var zero T; v = zero }, each)
}

// StrictUnmarshal decodes one JSON value into v under the same rules as
// DecodeElements; the error is an *InputError of element index.
func StrictUnmarshal(data []byte, v any, index int) *InputError {
	if err := json.Unmarshal(data, v, strictOptions); err != nil {
		return asInputError(decodeErr(err, index, 0, v), index)
	}
	return nil
}

func asInputError(err error, index int) *InputError {
	var ie *InputError
	if errors.As(err, &ie) {
		return ie
	}
	return inputErrRule(index, "", RuleSyntax, "%s", err.Error())
}

func decodeStream[T any](r io.Reader, ndjson bool, maxLine int, v *T, reset func(), each func(i int, v *T) *InputError) (int, error) {
	if ndjson {
		return decodeNDJSON(r, maxLine, v, reset, each)
	}
	br := bufio.NewReaderSize(r, 32<<10)
	first, err := skipSpace(br)
	if err == io.EOF {
		return 0, inputErrRule(0, "", RuleSyntax, "empty body: send a JSON object, a JSON array, or NDJSON lines with Content-Type application/x-ndjson")
	}
	if err != nil {
		return 0, decodeErr(err, 0, 0, v)
	}
	dec := jsontext.NewDecoder(br, strictOptions)
	switch first {
	case '{':
		reset()
		if err := json.UnmarshalDecode(dec, v, strictOptions); err != nil {
			return 1, decodeErr(err, 0, 0, v)
		}
		if ie := each(0, v); ie != nil {
			return 1, ie
		}
		if err := expectEOF(dec); err != nil {
			return 1, decodeErr(err, 0, 0, v)
		}
		return 1, nil
	case '[':
		return decodeArray(dec, v, reset, each)
	default:
		return 0, inputErrRule(0, "", RuleSyntax, "the body must be a JSON object or a JSON array of objects (for NDJSON send Content-Type application/x-ndjson)")
	}
}

func decodeArray[T any](dec *jsontext.Decoder, v *T, reset func(), each func(i int, v *T) *InputError) (int, error) {
	if _, err := dec.ReadToken(); err != nil {
		return 0, decodeErr(err, 0, 0, v)
	}
	fast := fastPathOf(v)
	i := 0
	for dec.PeekKind() != ']' {
		if dec.PeekKind() == 0 {
			_, err := dec.ReadToken()
			if err == nil || errors.Is(err, io.EOF) {
				err = io.ErrUnexpectedEOF
			}
			return i, decodeErr(err, i, 0, v)
		}
		reset()
		if err := fast.unmarshalDecode(dec, v); err != nil {
			return i + 1, inElement(decodeErr(err, i, 0, v), i)
		}
		if ie := each(i, v); ie != nil {
			return i + 1, ie
		}
		i++
	}
	if _, err := dec.ReadToken(); err != nil {
		return i, decodeErr(err, i, 0, v)
	}
	if err := expectEOF(dec); err != nil {
		return i, decodeErr(err, max(i-1, 0), 0, v)
	}
	return i, nil
}

// inElement drops the array position the decoder puts in front of a
// field name: the error carries it as the index.
func inElement(err error, i int) error {
	var ie *InputError
	if errors.As(err, &ie) {
		pos := strconv.Itoa(i)
		if ie.Field == pos {
			ie.Field = ""
		} else {
			ie.Field = strings.TrimPrefix(ie.Field, pos+".")
		}
		if ie.Field == "" && ie.Rule == RuleType {
			ie.Msg = strings.Replace(ie.Msg, "must be an object", "each element must be a JSON object", 1)
		}
	}
	return err
}

// errTrailing marks data after the one JSON value a body may hold.
var errTrailing = errors.New("unexpected data after the JSON value")

// expectEOF checks that nothing but white space follows the value.
func expectEOF(dec *jsontext.Decoder) error {
	_, err := dec.ReadToken()
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

// decodeNDJSON reads one object per line; errors name the line.
func decodeNDJSON[T any](r io.Reader, maxLine int, v *T, reset func(), each func(i int, v *T) *InputError) (int, error) {
	// The scanner hands out the unfinished last line when the reader
	// fails, so a body cut off at the size limit would look truncated;
	// the recorder tells the two apart.
	rec := &readRecorder{r: r}
	sc := bufio.NewScanner(rec)
	sc.Buffer(make([]byte, 0, 64<<10), maxLine)
	fast := fastPathOf(v)
	i, line := 0, 0
	fail := func(err error) (int, error) {
		var mbe *limitError
		if errors.As(rec.err, &mbe) {
			return i + 1, decodeErr(rec.err, i, line, v)
		}
		return i + 1, err
	}
	for sc.Scan() {
		line++
		b := sc.Bytes()
		if isBlank(b) {
			continue
		}
		reset()
		if err := fast.unmarshal(b, v); err != nil {
			if isTrailingValue(b) {
				ie := inputErrRule(i, "", RuleSyntax, "more than one JSON value on the line: NDJSON takes one object per line")
				ie.Line = line
				return fail(ie)
			}
			return fail(decodeErr(err, i, line, v))
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
		return i, decodeErr(err, i, line+1, v)
	}
	if i == 0 {
		return 0, inputErrRule(0, "", RuleSyntax, "empty body: no NDJSON lines")
	}
	return i, nil
}

// isTrailingValue reports whether b holds one complete JSON value followed
// by more, as a line of two objects does.
func isTrailingValue(b []byte) bool {
	dec := jsontext.NewDecoder(bytes.NewReader(b))
	if _, err := dec.ReadValue(); err != nil {
		return false
	}
	_, err := dec.ReadToken()
	return err != io.EOF
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
// 0) into an *InputError naming the field and the rule, or into
// ErrTooLarge. v is the element being decoded: its field names let a
// case-variant key be told from an unknown one. No message carries a
// name of the program's own types.
func decodeErr(err error, i, line int, v any) error {
	var mbe *limitError
	if errors.As(err, &mbe) {
		return fmt.Errorf("%w: the limit is %d bytes", ErrTooLarge, mbe.Limit)
	}
	ie := &InputError{Index: i, Line: line, Rule: RuleSyntax}
	var syn *jsontext.SyntacticError
	var sem *json.SemanticError
	switch {
	case errors.Is(err, jsontext.ErrDuplicateName) && errors.As(err, &syn):
		ie.Field = pointerField(syn.JSONPointer)
		ie.Rule = RuleDuplicateKey
		ie.Msg = fmt.Sprintf("key %q appears twice in the same object: each key may be given once", lastToken(syn.JSONPointer))
	case errors.Is(err, json.ErrUnknownName) && errors.As(err, &sem):
		ie.Field = pointerField(sem.JSONPointer)
		ie.Msg = unknownKeyMsg(lastToken(sem.JSONPointer), v)
		ie.Rule = RuleUnknownKey
		if strings.Contains(ie.Msg, "differs only in case") {
			ie.Rule = RuleCaseVariant
		}
	case errors.Is(err, io.ErrUnexpectedEOF):
		ie.Msg = "truncated JSON: the body ends inside a value"
	case errors.As(err, &syn):
		ie.Field = pointerField(syn.JSONPointer)
		ie.Msg = "malformed JSON at " + byteAt(syn.ByteOffset, line) + ": " + syntaxWhy(syn.Err)
	case errors.As(err, &sem):
		ie.Field = pointerField(sem.JSONPointer)
		ie.Rule = RuleType
		ie.Msg = semanticMsg(sem)
	case errors.Is(err, errTrailing):
		ie.Msg = errTrailing.Error() + ": send one object, one array, or NDJSON"
	default:
		ie.Msg = "reading the body failed: " + err.Error()
	}
	if ie.Field == "" && ie.Rule == RuleType {
		ie.Msg = "each element must be a JSON object, not " + kindName(sem.JSONKind)
	}
	return ie
}

func byteAt(off int64, line int) string {
	at := "byte " + strconv.FormatInt(off, 10)
	if line > 0 {
		at += " of the line"
	}
	return at
}

// syntaxWhy words a syntax fault without the library's prefixes.
func syntaxWhy(err error) string {
	if err == nil {
		return "invalid syntax"
	}
	s := err.Error()
	s = strings.TrimPrefix(s, "jsontext: ")
	s = strings.TrimPrefix(s, "json: ")
	if strings.Contains(s, "UTF-8") {
		return "invalid UTF-8 in a string"
	}
	return s
}

// pointerField turns a JSON pointer ("/counts/0.5") into the field name
// the errors use ("counts.0.5").
func pointerField(p jsontext.Pointer) string {
	var parts []string
	for tok := range p.Tokens() {
		parts = append(parts, tok)
	}
	return strings.Join(parts, ".")
}

func lastToken(p jsontext.Pointer) string {
	last := ""
	for tok := range p.Tokens() {
		last = tok
	}
	return last
}

// fieldNames caches the JSON names of each element type's fields.
var fieldNames sync.Map // reflect.Type → []string

func namesOf(v any) []string {
	t := reflect.TypeOf(v)
	for t != nil && t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if t == nil || t.Kind() != reflect.Struct {
		return nil
	}
	if got, ok := fieldNames.Load(t); ok {
		return got.([]string)
	}
	var names []string
	for i := range t.NumField() {
		f := t.Field(i)
		name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
		if name != "" && name != "-" {
			names = append(names, name)
		}
	}
	fieldNames.Store(t, names)
	return names
}

func unknownKeyMsg(key string, v any) string {
	names := namesOf(v)
	for _, n := range names {
		if strings.EqualFold(n, key) {
			return fmt.Sprintf("key %q differs only in case from %q: keys are exact and lower-case", key, n)
		}
	}
	if len(names) == 0 {
		return fmt.Sprintf("unknown key %q", key)
	}
	return fmt.Sprintf("unknown key %q (known: %s)", key, strings.Join(names, ", "))
}

// semanticMsg words a value of the wrong kind or out of range.
func semanticMsg(sem *json.SemanticError) string {
	got := kindName(sem.JSONKind)
	if sem.JSONKind == '0' && len(sem.JSONValue) > 0 {
		if _, err := strconv.ParseFloat(string(sem.JSONValue), 64); err != nil {
			return "number " + truncate(string(sem.JSONValue), 40) + " is out of range"
		}
	}
	want := "a valid value"
	if sem.GoType != nil {
		want = goKindName(sem.GoType)
	}
	return "must be " + want + ", not " + got
}

func kindName(k jsontext.Kind) string {
	switch k {
	case '"':
		return "a string"
	case '0':
		return "a number"
	case 't', 'f':
		return "a boolean"
	case 'n':
		return "null"
	case '{':
		return "an object"
	case '[':
		return "an array"
	}
	return "this value"
}

// goKindName words what a field takes, by kind, never by type name.
func goKindName(t reflect.Type) string {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	switch t.Kind() {
	case reflect.Float32, reflect.Float64:
		return "a finite number"
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
		reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		return "a whole number"
	case reflect.String:
		return "a string"
	case reflect.Bool:
		return "a boolean"
	case reflect.Map, reflect.Struct:
		return "an object"
	case reflect.Slice, reflect.Array:
		return "an array"
	}
	return "a valid value"
}

func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	return s[:n] + "…"
}

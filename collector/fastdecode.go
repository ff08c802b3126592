package collector

import (
	"strconv"
	"unicode/utf8"

	"github.com/go-json-experiment/json"
	"github.com/go-json-experiment/json/jsontext"
)

// fastPath decodes the plain, well-formed shape of a reading with a
// hand-written scanner, which costs a fraction of the reflective decoder.
// It never refuses anything itself: whatever it is not sure of (escapes,
// null, a key it does not know, a key twice, odd white space, a value of
// an unexpected kind, a number the decoder would refuse, trailing bytes)
// goes to the strict decoder on the very same bytes, so that refusals and
// their wording stay the strict decoder's. Whatever it accepts decodes to
// exactly what the strict decoder makes of it.
//
// Element types other than RawReading always take the strict decoder.
type fastPath struct {
	r *RawReading // the element being decoded; nil: no fast path
	d readingScanner
}

// fastPathOf returns the fast path for the element v of a stream, which
// the stream resets before each element.
func fastPathOf(v any) *fastPath {
	r, _ := v.(*RawReading)
	return &fastPath{r: r}
}

// unmarshal decodes b, one NDJSON line, into v (freshly reset) as
// json.Unmarshal with strictOptions does.
func (f *fastPath) unmarshal(b []byte, v any) error {
	if f.r != nil && f.line(b) {
		return nil
	}
	return json.Unmarshal(b, v, strictOptions)
}

// unmarshalDecode decodes the next value of dec into v (freshly reset) as
// json.UnmarshalDecode with strictOptions does. dec must have peeked at
// the value, as the loop over an array's elements does.
func (f *fastPath) unmarshalDecode(dec *jsontext.Decoder, v any) error {
	if f.r != nil {
		if ok, err := f.element(dec); ok || err != nil {
			return err
		}
	}
	return json.UnmarshalDecode(dec, v, strictOptions)
}

// line decodes b into f.r when b is a plain reading and nothing but JSON
// white space surrounds it. On false f.r is as on entry.
func (f *fastPath) line(b []byte) bool {
	m := f.r.Counts
	i := skipWS(b, 0)
	n, ok := f.d.object(b[i:], f.r)
	if ok && skipWS(b, i+n) == len(b) {
		return true
	}
	f.undo(m)
	return false
}

// element decodes the next array element of dec into f.r when it is a
// plain reading held whole in the decoder's buffer, and then moves dec
// past it. When it reports false and no error, f.r is as on entry and
// dec has not moved.
func (f *fastPath) element(dec *jsontext.Decoder) (bool, error) {
	m := f.r.Counts
	// The unread buffer starts after the previous token: the separator
	// before this element, which the decoder has already checked, comes
	// first.
	buf := dec.UnreadBuffer()
	i := skipWS(buf, 0)
	if i < len(buf) && buf[i] == ',' {
		i = skipWS(buf, i+1)
	}
	n, ok := f.d.object(buf[i:], f.r)
	if !ok {
		f.undo(m)
		return false, nil
	}
	// The decoder checks the element once more and steps over it. An
	// element the scanner takes is one the decoder takes, whole, so
	// neither branch below is expected; should the two ever disagree,
	// the decoder's word is final.
	val, err := dec.ReadValue()
	if err != nil {
		f.undo(m)
		return false, err
	}
	if len(val) != n {
		f.undo(m)
		return true, json.Unmarshal(val, f.r, strictOptions)
	}
	return true, nil
}

// undo returns f.r to the reset state it was in on entry, counts map m
// included: a map the scanner made is dropped again, so that what the
// strict decoder then sees is exactly what the stream handed over.
func (f *fastPath) undo(m map[string]Count) {
	clear(m)
	*f.r = RawReading{Counts: m}
}

// maxInterned bounds how many distinct strings a scanner keeps for reuse:
// counter names, modes, statuses and channel sizes repeat from reading to
// reading, but a body may also be built to make every one new.
const maxInterned = 256

// readingScanner holds what the scanning of one stream's readings reuses.
type readingScanner struct {
	strs map[string]string
}

// intern returns b as a string, the same string for the same bytes while
// the scanner's table has room.
func (s *readingScanner) intern(b []byte) string {
	if str, ok := s.strs[string(b)]; ok {
		return str
	}
	str := string(b)
	if len(s.strs) < maxInterned && len(b) <= 64 {
		if s.strs == nil {
			s.strs = make(map[string]string)
		}
		s.strs[str] = str
	}
	return str
}

// The members of a reading, one bit each, to tell a key given twice.
const (
	seenCounter = 1 << iota
	seenTime
	seenVolume
	seenCounts
	seenMode
	seenFlow
	seenSample
	seenStatus
)

// object scans one JSON object starting at b[0] into r, which is freshly
// reset, and returns its length. It reports false on anything but the
// plain shape of a reading; r is then partly written.
func (s *readingScanner) object(b []byte, r *RawReading) (int, bool) {
	if len(b) == 0 || b[0] != '{' {
		return 0, false
	}
	i := skipWS(b, 1)
	if i < len(b) && b[i] == '}' {
		return i + 1, true
	}
	var seen uint8
	for {
		key, j, ok := scanString(b, i)
		if !ok {
			return 0, false
		}
		i = skipWS(b, j)
		if i >= len(b) || b[i] != ':' {
			return 0, false
		}
		i = skipWS(b, i+1)
		var bit uint8
		switch string(key) {
		case "counter":
			bit = seenCounter
			var v []byte
			if v, i, ok = scanString(b, i); ok {
				r.Counter = s.intern(v)
			}
		case "time":
			bit = seenTime
			var v []byte
			if v, i, ok = scanString(b, i); ok {
				r.Time = string(v)
			}
		case "mode":
			bit = seenMode
			var v []byte
			if v, i, ok = scanString(b, i); ok {
				r.Mode = s.intern(v)
			}
		case "status":
			bit = seenStatus
			var v []byte
			if v, i, ok = scanString(b, i); ok {
				r.Status = s.intern(v)
			}
		case "volume_l":
			bit = seenVolume
			var x float64
			if x, i, ok = scanFloat(b, i); ok {
				r.VolumeL = &x
			}
		case "flow_lpm":
			bit = seenFlow
			r.FlowLPM, i, ok = scanFloat(b, i)
		case "sample_s":
			bit = seenSample
			r.SampleS, i, ok = scanFloat(b, i)
		case "counts":
			bit = seenCounts
			i, ok = s.counts(b, i, r)
		default:
			return 0, false
		}
		if !ok || seen&bit != 0 {
			return 0, false
		}
		seen |= bit
		next, end, ok := nextMember(b, i)
		if !ok || end {
			return next, ok
		}
		i = next
	}
}

// nextMember steps over the white space and the ',' or '}' after an
// object's member at b[i]: next is where the next member starts, or, at
// the object's end (end true), the index after its '}'.
func nextMember(b []byte, i int) (next int, end, ok bool) {
	i = skipWS(b, i)
	if i >= len(b) {
		return 0, false, false
	}
	switch b[i] {
	case ',':
		return skipWS(b, i+1), false, true
	case '}':
		return i + 1, true, true
	}
	return 0, false, false
}

// counts scans the counts object starting at b[i] into r.Counts, which is
// empty or nil (a second counts object is refused by the caller anyway),
// and returns the index after it. Only numbers are taken as
// values; each goes through Count's own decoding, as with the decoder.
func (s *readingScanner) counts(b []byte, i int, r *RawReading) (int, bool) {
	if i >= len(b) || b[i] != '{' {
		return 0, false
	}
	m := r.Counts
	if m == nil {
		m = make(map[string]Count)
		r.Counts = m
	}
	i = skipWS(b, i+1)
	if i < len(b) && b[i] == '}' {
		return i + 1, true
	}
	for {
		key, j, ok := scanString(b, i)
		if !ok {
			return 0, false
		}
		i = skipWS(b, j)
		if i >= len(b) || b[i] != ':' {
			return 0, false
		}
		lit, j, ok := scanNumber(b, skipWS(b, i+1))
		if !ok {
			return 0, false
		}
		var c Count
		if err := c.UnmarshalJSON(lit); err != nil {
			return 0, false
		}
		// A key given twice replaces its entry instead of adding one.
		n := len(m)
		if m[s.intern(key)] = c; len(m) == n {
			return 0, false
		}
		next, end, ok := nextMember(b, j)
		if !ok || end {
			return next, ok
		}
		i = next
	}
}

// skipWS returns the index of the first byte at or after i that is not
// JSON white space.
func skipWS(b []byte, i int) int {
	for i < len(b) {
		switch b[i] {
		case ' ', '\t', '\n', '\r':
			i++
		default:
			return i
		}
	}
	return i
}

// scanString scans a JSON string starting at b[i] and returns its
// contents and the index after it. A string with an escape, a control
// character or invalid UTF-8 is not taken.
func scanString(b []byte, i int) ([]byte, int, bool) {
	if i >= len(b) || b[i] != '"' {
		return nil, 0, false
	}
	j := i + 1
	for j < len(b) && plainByte[b[j]] {
		j++
	}
	if j < len(b) && b[j] == '"' {
		return b[i+1 : j], j + 1, true
	}
	// Rarer: non-ASCII text, checked as the decoder checks it.
	for ; j < len(b); j++ {
		switch c := b[j]; {
		case c == '"':
			v := b[i+1 : j]
			if !utf8.Valid(v) {
				return nil, 0, false
			}
			return v, j + 1, true
		case c == '\\' || c < 0x20:
			return nil, 0, false
		}
	}
	return nil, 0, false
}

// plainByte marks the bytes a string may hold as they are: printable
// ASCII but for the quote and the backslash.
var plainByte = func() (t [256]bool) {
	for c := 0x20; c < utf8.RuneSelf; c++ {
		t[c] = c != '"' && c != '\\'
	}
	return t
}()

// scanNumber scans a number of JSON's grammar starting at b[i] and returns
// its text and the index after it. What follows is left to the caller,
// which takes only a separator: "01" or "1x" is then not taken.
func scanNumber(b []byte, i int) ([]byte, int, bool) {
	j := i
	if j < len(b) && b[j] == '-' {
		j++
	}
	switch {
	case j >= len(b):
		return nil, 0, false
	case b[j] == '0':
		j++
	case '1' <= b[j] && b[j] <= '9':
		j = skipDigits(b, j+1)
	default:
		return nil, 0, false
	}
	if j < len(b) && b[j] == '.' {
		k := skipDigits(b, j+1)
		if k == j+1 {
			return nil, 0, false
		}
		j = k
	}
	if j < len(b) && (b[j] == 'e' || b[j] == 'E') {
		j++
		if j < len(b) && (b[j] == '+' || b[j] == '-') {
			j++
		}
		k := skipDigits(b, j)
		if k == j {
			return nil, 0, false
		}
		j = k
	}
	return b[i:j], j, true
}

func skipDigits(b []byte, i int) int {
	for i < len(b) && '0' <= b[i] && b[i] <= '9' {
		i++
	}
	return i
}

// scanFloat scans a number starting at b[i] as the decoder reads one into
// a float64: by strconv.ParseFloat, a number beyond float64's range being
// the decoder's to refuse.
func scanFloat(b []byte, i int) (float64, int, bool) {
	lit, j, ok := scanNumber(b, i)
	if !ok {
		return 0, 0, false
	}
	x, err := strconv.ParseFloat(string(lit), 64)
	if err != nil {
		return 0, 0, false
	}
	return x, j, true
}

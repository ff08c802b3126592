package collector

import (
	"bytes"
	"io"
	"math"
	"reflect"
	"strings"
	"testing"
	"testing/iotest"

	"github.com/go-json-experiment/json"
	"github.com/go-json-experiment/json/jsontext"
)

// fastCases are reading lines for the fast path. fast marks those it must
// take (the plain shapes senders use); for the others it may take them or
// leave them to the strict decoder, but must never differ from it.
var fastCases = []struct {
	name string
	line string
	fast bool
}{
	// Plain readings, as senders write them.
	{"good", good, true},
	{"simulated", `{"counter":"pc-asm-1","time":"2026-03-01T00:00:00Z","volume_l":28.759,"counts":{"0.5":2539,"1":623,"5":28},"flow_lpm":28.759,"sample_s":60,"status":"ok"}`, true},
	{"all fields", `{"counter":"pc-hood","time":"2026-03-02T09:59:00.5+01:00","volume_l":28.3,"counts":{"0.3um":1200,"0.5um":310,"5um":2},"mode":"cumulative","flow_lpm":28.3,"sample_s":60,"status":"warning"}`, true},
	{"reordered", `{"status":"fault","counts":{"5":2,"0.5":310},"mode":"differential","time":"t","counter":"c","sample_s":1,"flow_lpm":2,"volume_l":3}`, true},
	{"empty object", `{}`, true},
	{"empty object spaced", " \t{ \r\n}\t ", true},
	{"empty counts", `{"counts":{}}`, true},
	{"empty counts spaced", `{"counts":{ 	}}`, true},
	{"white space everywhere", " { \"counter\" : \"a\" ,\t\"counts\" :\r\n{ \"0.5\" : 1 , \"1\":2 } , \"volume_l\" : 1.5 } \r", true},
	{"only counter", `{"counter":"pc-asm-1"}`, true},
	{"empty strings", `{"counter":"","time":"","mode":"","status":""}`, true},
	{"empty count key", `{"counts":{"":5}}`, true},
	{"utf8 string", `{"counter":"pc-ü-€-𝄞","time":"2026"}`, true},
	{"utf8 count key", `{"counts":{"0.5µm":3}}`, true},
	{"replacement char", "{\"counter\":\"\xef\xbf\xbd\"}", true},
	{"del char", "{\"counter\":\"a\x7fb\"}", true},
	{"slash", `{"counter":"a/b"}`, true},
	{"many counts", `{"counts":{"0.1":1,"0.2":2,"0.3":3,"0.5":4,"0.7":5,"1":6,"2":7,"3":8,"5":9,"10":10,"25":11}}`, true},
	{"same key in counts and top", `{"counter":"counts","counts":{"counter":1}}`, true},

	// Numbers.
	{"zero", `{"volume_l":0,"flow_lpm":0,"sample_s":0}`, true},
	{"negative zero", `{"volume_l":-0,"flow_lpm":-0.0,"sample_s":-0e0}`, true},
	{"negative", `{"volume_l":-28.3,"flow_lpm":-1,"sample_s":-0.5}`, true},
	{"exponents", `{"volume_l":2.83e1,"flow_lpm":283E-1,"sample_s":6e+1}`, true},
	{"tiny", `{"volume_l":1.5e-300,"flow_lpm":5e-324,"sample_s":4.9406564584124654e-324}`, true},
	{"underflow", `{"volume_l":1e-400,"flow_lpm":-1e-400}`, true},
	{"overflow", `{"volume_l":1e400}`, false},
	{"overflow negative", `{"flow_lpm":-1e309}`, false},
	{"largest", `{"volume_l":1.7976931348623157e308}`, true},
	{"long mantissa", `{"volume_l":28.30000000000000000000000000000000000000001}`, true},
	{"long integer", `{"volume_l":123456789012345678901234567890}`, true},
	{"halfway", `{"volume_l":9007199254740993}`, true},
	{"leading zero", `{"volume_l":01}`, false},
	{"leading zero fraction", `{"volume_l":00.5}`, false},
	{"bare dot", `{"volume_l":.5}`, false},
	{"trailing dot", `{"volume_l":5.}`, false},
	{"plus", `{"volume_l":+5}`, false},
	{"bare minus", `{"volume_l":-}`, false},
	{"bare exponent", `{"volume_l":1e}`, false},
	{"exponent sign only", `{"volume_l":1e+}`, false},
	{"hex", `{"volume_l":0x10}`, false},
	{"underscore", `{"volume_l":1_000}`, false},
	{"NaN", `{"volume_l":NaN}`, false},
	{"Infinity", `{"volume_l":Infinity}`, false},
	{"number then letter", `{"volume_l":1x}`, false},
	{"number as string", `{"volume_l":"28.3"}`, false},

	// Counts, each through Count's own decoding.
	{"count zero", `{"counts":{"0.5":0}}`, true},
	{"count 2^53", `{"counts":{"0.5":9007199254740992}}`, true},
	{"count beyond 2^53", `{"counts":{"0.5":9007199254740993}}`, true},
	{"count 17 digits", `{"counts":{"0.5":12345678901234567}}`, true},
	{"count huge", `{"counts":{"0.5":123456789012345678901234567890}}`, true},
	{"count float whole", `{"counts":{"0.5":1200.0,"1":1.2e3,"5":5E0}}`, true},
	{"count fraction", `{"counts":{"0.5":1.5}}`, true},
	{"count negative", `{"counts":{"0.5":-1}}`, true},
	{"count negative zero", `{"counts":{"0.5":-0,"1":-0.0}}`, true},
	{"count overflow", `{"counts":{"0.5":1e400}}`, true},
	{"count leading zero", `{"counts":{"0.5":007}}`, false},
	{"count string", `{"counts":{"0.5":"5"}}`, false},
	{"count null", `{"counts":{"0.5":null}}`, false},
	{"count bool", `{"counts":{"0.5":true}}`, false},
	{"count object", `{"counts":{"0.5":{"n":1}}}`, false},
	{"count array", `{"counts":{"0.5":[1]}}`, false},
	{"count key twice", `{"counts":{"0.5":1,"0.5":2}}`, false},
	{"count key twice spelt apart", `{"counts":{"0.5":1,"0\u002e5":2}}`, false},
	{"count keys distinct", `{"counts":{"0.5":1,"0.5um":2,"0.50":3}}`, true},
	{"count key escaped", `{"counts":{"0\u002e5":1}}`, false},
	{"count key invalid utf8", "{\"counts\":{\"0.5\xff\":1}}", false},
	{"count key not string", `{"counts":{5:1}}`, false},
	{"count trailing comma", `{"counts":{"0.5":1,}}`, false},
	{"count missing colon", `{"counts":{"0.5" 1}}`, false},
	{"count missing comma", `{"counts":{"0.5":1 "1":2}}`, false},
	{"counts unterminated", `{"counts":{"0.5":1`, false},

	// Strings.
	{"escaped quote", `{"counter":"a\"b"}`, false},
	{"escaped unicode", `{"counter":"\u00fc"}`, false},
	{"escaped surrogates", `{"counter":"\ud834\udd1e"}`, false},
	{"lone surrogate escape", `{"counter":"\ud834"}`, false},
	{"raw tab in string", "{\"counter\":\"a\tb\"}", false},
	{"raw newline in string", "{\"counter\":\"a\nb\"}", false},
	{"raw NUL in string", "{\"counter\":\"a\x00b\"}", false},
	{"invalid utf8", "{\"counter\":\"\xff\"}", false},
	{"truncated utf8", "{\"counter\":\"\xc3\"}", false},
	{"overlong utf8", "{\"counter\":\"\xc0\xaf\"}", false},
	{"surrogate utf8", "{\"counter\":\"\xed\xa0\x80\"}", false},
	{"beyond U+10FFFF", "{\"counter\":\"\xf4\x90\x80\x80\"}", false},
	{"unterminated string", `{"counter":"abc`, false},
	{"single quotes", `{'counter':'a'}`, false},

	// Keys.
	{"unknown key", `{"counter":"a","colour":"red"}`, false},
	{"case variant", `{"Counter":"a"}`, false},
	{"case variant upper", `{"COUNTS":{}}`, false},
	{"key twice", `{"counter":"a","counter":"b"}`, false},
	{"counts twice", `{"counts":{"0.5":1},"counts":{"1":2}}`, false},
	{"volume twice", `{"volume_l":1,"volume_l":1}`, false},
	{"escaped key", `{"\u0063ounter":"a"}`, false},
	{"escaped key twice", `{"counter":"a","\u0063ounter":"b"}`, false},
	{"key with space", `{"counter ":"a"}`, false},
	{"key prefix", `{"count":"a"}`, false},
	{"empty key", `{"":1}`, false},
	{"non-ascii key", `{"cöunter":"a"}`, false},
	{"key not string", `{counter:"a"}`, false},

	// Values of another kind.
	{"null counter", `{"counter":null}`, false},
	{"null volume", `{"volume_l":null}`, false},
	{"null counts", `{"counts":null}`, false},
	{"null flow", `{"flow_lpm":null}`, false},
	{"number counter", `{"counter":1}`, false},
	{"bool mode", `{"mode":true}`, false},
	{"object status", `{"status":{}}`, false},
	{"array counts", `{"counts":[1,2]}`, false},
	{"string counts", `{"counts":"0.5"}`, false},
	{"object volume", `{"volume_l":{"v":1}}`, false},
	{"array time", `{"time":["2026"]}`, false},

	// Syntax and framing.
	{"empty", ``, false},
	{"blank", "  \t", false},
	{"array", `[{"counter":"a"}]`, false},
	{"string", `"counter"`, false},
	{"number", `5`, false},
	{"null", `null`, false},
	{"trailing comma", `{"counter":"a",}`, false},
	{"leading comma", `{,"counter":"a"}`, false},
	{"missing colon", `{"counter" "a"}`, false},
	{"missing comma", `{"counter":"a" "time":"b"}`, false},
	{"double colon", `{"counter"::"a"}`, false},
	{"unterminated", `{"counter":"a"`, false},
	{"unterminated after comma", `{"counter":"a",`, false},
	{"only brace", `{`, false},
	{"trailing garbage", `{"counter":"a"}x`, false},
	{"trailing brace", `{"counter":"a"}}`, false},
	{"two objects", `{"counter":"a"} {"counter":"b"}`, false},
	{"two objects joined", `{"counter":"a"}{"counter":"b"}`, false},
	{"byte order mark", "\xef\xbb\xbf{\"counter\":\"a\"}", false},
	{"NUL after", "{\"counter\":\"a\"}\x00", false},
	{"vertical tab", "{\v\"counter\":\"a\"}", false},
	{"form feed", "{\"counter\":\"a\"}\f", false},
	{"no-break space", "{\u00a0\"counter\":\"a\"}", false},
	{"comment", `{"counter":"a"/*c*/}`, false},
	{"deep", `{"counts":{"0.5":[[[[[[[[[[1]]]]]]]]]]}}`, false},
}

// cloneRaw copies r deeply, so that a later reset cannot change the copy.
func cloneRaw(r *RawReading) RawReading {
	c := *r
	if r.VolumeL != nil {
		v := *r.VolumeL
		c.VolumeL = &v
	}
	if r.Counts != nil {
		c.Counts = make(map[string]Count, len(r.Counts))
		for k, v := range r.Counts {
			c.Counts[k] = v
		}
	}
	return c
}

// checkFastLine asserts the fast path's promise on one NDJSON line: it
// either leaves the element as it found it, or decodes it exactly as the
// strict decoder does, without error. It checks from a fresh element and
// from one whose counts map a previous reading left behind, and reports
// whether the fast path took the line.
func checkFastLine(t testing.TB, b []byte) bool {
	t.Helper()
	took := false
	for _, used := range []bool{false, true} {
		var ref, got RawReading
		if used {
			for _, r := range []*RawReading{&ref, &got} {
				if err := json.Unmarshal([]byte(good), r, strictOptions); err != nil {
					t.Fatal(err)
				}
				r.reset()
			}
		}
		entry := cloneRaw(&got)
		entryMap := reflect.ValueOf(got.Counts).Pointer()
		refErr := json.Unmarshal(b, &ref, strictOptions)
		if !fastPathOf(&got).line(b) {
			if !reflect.DeepEqual(got, entry) || reflect.ValueOf(got.Counts).Pointer() != entryMap {
				t.Fatalf("%q: the fast path left %#v behind, not the element it was handed (%#v)", b, got, entry)
			}
			continue
		}
		took = true
		if refErr != nil {
			t.Fatalf("%q: the fast path took a line the strict decoder refuses (%v): %#v", b, refErr, got)
		}
		if !reflect.DeepEqual(got, ref) {
			t.Fatalf("%q: the fast path decoded\n%#v\nthe strict decoder\n%#v", b, got, ref)
		}
		// DeepEqual takes -0 for 0: the sign must match too.
		if !sameBits(got.VolumeL, ref.VolumeL) || !sameBits(&got.FlowLPM, &ref.FlowLPM) || !sameBits(&got.SampleS, &ref.SampleS) {
			t.Fatalf("%q: the fast path decoded %#v, the strict decoder %#v", b, got, ref)
		}
		if used && reflect.ValueOf(got.Counts).Pointer() != entryMap {
			t.Fatalf("%q: the counts map was not reused", b)
		}
	}
	return took
}

func sameBits(a, b *float64) bool {
	if a == nil || b == nil {
		return a == b
	}
	return math.Float64bits(*a) == math.Float64bits(*b)
}

// elementResult is what decoding one array element left: the element, the
// error, and where the decoder then stood.
type elementResult struct {
	raw    RawReading
	err    string
	offset int64
}

// How the decoder is fed in the element checks: the body whole in its
// buffer, in the buffer's own growing chunks, or one byte per read, so
// that elements arrive cut off at every place.
const (
	feedWhole = iota
	feedChunks
	feedBytes
)

// decodeElements decodes the elements of an array body as the array form
// of a stream does, by the fast path or by the strict decoder alone, and
// reports each element's result and how many the fast path took.
func decodeElements(body []byte, fast bool, feed int) ([]elementResult, int) {
	var r io.Reader
	switch feed {
	case feedWhole:
		r = bytes.NewBuffer(body)
	case feedChunks:
		r = bytes.NewReader(body)
	default:
		r = iotest.OneByteReader(bytes.NewReader(body))
	}
	dec := jsontext.NewDecoder(r, strictOptions)
	var res []elementResult
	if _, err := dec.ReadToken(); err != nil {
		return append(res, elementResult{err: err.Error()}), 0
	}
	var v RawReading
	f := fastPathOf(&v)
	took := 0
	for dec.PeekKind() != ']' {
		if dec.PeekKind() == 0 {
			_, err := dec.ReadToken()
			return append(res, elementResult{err: "peek: " + errString(err)}), took
		}
		v.reset()
		var err error
		if fast {
			var ok bool
			if ok, err = f.element(dec); ok {
				took++
			} else if err == nil {
				err = json.UnmarshalDecode(dec, &v, strictOptions)
			}
		} else {
			err = json.UnmarshalDecode(dec, &v, strictOptions)
		}
		res = append(res, elementResult{cloneRaw(&v), errString(err), dec.InputOffset()})
		if err != nil {
			return res, took
		}
	}
	_, err := dec.ReadToken()
	return append(res, elementResult{err: errString(err), offset: dec.InputOffset()}), took
}

func errString(err error) string {
	if err == nil {
		return ""
	}
	return err.Error()
}

// checkFastElement asserts the fast path's promise on elem as an element
// of an array, first and after another, with the body in the decoder's
// buffer whole, in chunks or a byte at a time: every element decodes, or
// fails, as with the strict decoder alone, and leaves the decoder at the
// same place. It reports whether the fast path took every element of the
// bodies held whole in the buffer.
func checkFastElement(t testing.TB, elem []byte) bool {
	t.Helper()
	bodies := [][]byte{
		append(append([]byte("["), elem...), ']'),
		append(append([]byte("[\n"+good+" ,\t"), elem...), "\n, "+good+"]"...),
	}
	took := true
	for _, body := range bodies {
		for _, feed := range []int{feedWhole, feedChunks, feedBytes} {
			want, _ := decodeElements(body, false, feed)
			got, n := decodeElements(body, true, feed)
			if !reflect.DeepEqual(got, want) {
				t.Fatalf("array %q (feed %d):\nfast path %#v\nstrict decoder %#v", body, feed, got, want)
			}
			for i := range got {
				g, w := &got[i].raw, &want[i].raw
				if !sameBits(g.VolumeL, w.VolumeL) || !sameBits(&g.FlowLPM, &w.FlowLPM) || !sameBits(&g.SampleS, &w.SampleS) {
					t.Fatalf("array %q (feed %d), element %d: fast path %#v, strict decoder %#v", body, feed, i, g, w)
				}
			}
			if feed == feedWhole && n != len(want)-1 {
				took = false
			}
		}
	}
	return took
}

func TestFastReadingLine(t *testing.T) {
	for _, c := range fastCases {
		t.Run(c.name, func(t *testing.T) {
			took := checkFastLine(t, []byte(c.line))
			if c.fast && !took {
				t.Errorf("the fast path left %q to the strict decoder", c.line)
			}
		})
	}
}

func TestFastReadingElement(t *testing.T) {
	for _, c := range fastCases {
		t.Run(c.name, func(t *testing.T) {
			took := checkFastElement(t, []byte(c.line))
			if c.fast && !took {
				t.Errorf("the fast path left the element %q to the strict decoder", c.line)
			}
		})
	}
}

// TestFastReadingStream decodes whole bodies through the stream, whose
// readings the fast path takes, and checks them against the strict
// decoder line by line.
func TestFastReadingStream(t *testing.T) {
	var lines []string
	for _, c := range fastCases {
		if c.fast && !strings.Contains(c.line, "\n") {
			lines = append(lines, c.line)
		}
	}
	var want []RawReading
	for _, l := range lines {
		var r RawReading
		if err := json.Unmarshal([]byte(l), &r, strictOptions); err != nil {
			t.Fatalf("%s: %v", l, err)
		}
		want = append(want, r)
	}
	bodies := map[string]struct {
		body []byte
		f    bodyFormat
	}{
		"ndjson": {[]byte(strings.Join(lines, "\n")), formatNDJSON},
		"array":  {[]byte("[" + strings.Join(lines, ",\n") + "]"), formatJSON},
	}
	for name, b := range bodies {
		t.Run(name, func(t *testing.T) {
			var got []RawReading
			n, err := decodeBody(bytes.NewReader(b.body), b.f, fuzzMaxBody, func(_ int, r *RawReading) *InputError {
				got = append(got, cloneRaw(r))
				return nil
			})
			if err != nil || n != len(want) {
				t.Fatalf("%d elements, %v", n, err)
			}
			for i := range want {
				// A stream reuses one counts map: a reading without
				// counts has it empty, not nil.
				if want[i].Counts == nil && i > 0 {
					want[i].Counts = map[string]Count{}
				}
				if !reflect.DeepEqual(got[i], want[i]) {
					t.Errorf("element %d: %#v, want %#v", i, got[i], want[i])
				}
			}
		})
	}
}

// TestFastReadingInternFull checks that a scanner whose table of strings
// is full still decodes what it takes exactly.
func TestFastReadingInternFull(t *testing.T) {
	var r RawReading
	f := fastPathOf(&r)
	for i := range maxInterned + 10 {
		r.reset()
		line := `{"counter":"pc-` + strings.Repeat("x", i%70) + `-` + string(rune('a'+i%26)) + `","counts":{"k` + strings.Repeat("y", i) + `":1}}`
		if !f.line([]byte(line)) {
			t.Fatalf("not taken: %s", line)
		}
		var want RawReading
		if err := json.Unmarshal([]byte(line), &want, strictOptions); err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(r, want) {
			t.Fatalf("%s: %#v, want %#v", line, r, want)
		}
	}
	if len(f.d.strs) > maxInterned {
		t.Fatalf("%d strings kept, more than %d", len(f.d.strs), maxInterned)
	}
}

// FuzzFastReadingLine checks the fast path's promise on arbitrary bytes,
// as an NDJSON line and as an array element.
func FuzzFastReadingLine(f *testing.F) {
	for _, c := range fastCases {
		f.Add([]byte(c.line))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		checkFastLine(t, b)
		checkFastElement(t, b)
	})
}

package collector

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"strings"
	"testing"
	"time"
)

// Seed corpora live in testdata/fuzz/FuzzDecodeReadings and
// testdata/fuzz/FuzzDecodePressure (go test's layout); `go test` runs them
// as regression cases, `go test -fuzz FuzzDecodeReadings` explores from
// them.

const fuzzMaxBody = 1 << 20

func fuzzFormat(ndjson bool) bodyFormat {
	if ndjson {
		return formatNDJSON
	}
	return formatJSON
}

// checkDecodeErr asserts the error invariants: a refusal is an
// *InputError with a message and an index within the elements seen.
func checkDecodeErr(t *testing.T, err error, seen int) {
	t.Helper()
	if errors.Is(err, ErrTooLarge) {
		return
	}
	var ie *InputError
	if !errors.As(err, &ie) {
		t.Fatalf("error %T %v is not an *InputError", err, err)
	}
	if ie.Index < 0 || ie.Index > seen {
		t.Fatalf("index %d outside 0..%d: %v", ie.Index, seen, ie)
	}
	if ie.Msg == "" {
		t.Fatalf("error without a message: %+v", ie)
	}
}

func FuzzDecodeReadings(f *testing.F) {
	f.Add([]byte(good), false)
	f.Add([]byte(good+"\n"+good), true)
	in := newTestIngest(f, newMemSink(), IngestOptions{})
	f.Fuzz(func(t *testing.T, body []byte, ndjson bool) {
		v := in.validator()
		var got []Reading
		seen, err := decodeBody(bytes.NewReader(body), fuzzFormat(ndjson), fuzzMaxBody, func(i int, raw *RawReading) *InputError {
			var r Reading
			if ie := v.reading(i, raw, &r); ie != nil {
				return ie
			}
			got = append(got, r)
			return nil
		})
		if err != nil {
			checkDecodeErr(t, err, seen)
			return
		}
		if len(got) != seen {
			t.Fatalf("%d readings from %d elements", len(got), seen)
		}
		for i, r := range got {
			checkReading(t, in, r)
			// An accepted reading re-validates to itself, directly and
			// after a trip through its JSON form.
			raw := r.Raw()
			var again Reading
			if ie := v.reading(i, &raw, &again); ie != nil {
				t.Fatalf("reading %d does not re-validate: %v", i, ie)
			}
			if !sameReading(r, again) {
				t.Fatalf("reading %d re-validates to %+v, not %+v", i, again, r)
			}
			js, err := json.Marshal(raw)
			if err != nil {
				t.Fatal(err)
			}
			var back []Reading
			if _, err := decodeBody(bytes.NewReader(js), formatJSON, fuzzMaxBody, func(i int, raw *RawReading) *InputError {
				var r Reading
				if ie := v.reading(i, raw, &r); ie != nil {
					return ie
				}
				back = append(back, r)
				return nil
			}); err != nil || len(back) != 1 || !sameReading(r, back[0]) {
				t.Fatalf("reading %d: JSON %s decodes to %+v, %v", i, js, back, err)
			}
		}
	})
}

// checkReading asserts what every accepted reading must satisfy.
func checkReading(t *testing.T, in *Ingest, r Reading) {
	t.Helper()
	ci, ok := in.reg.Counter(r.Counter)
	if !ok {
		t.Fatalf("accepted unknown counter %q", r.Counter)
	}
	if len(r.Counts) != len(ci.SizesUM) || len(r.PerM3) != len(ci.SizesUM) || len(r.Sizes) != len(ci.SizesUM) {
		t.Fatalf("channel slices %d/%d/%d for %d channels", len(r.Sizes), len(r.Counts), len(r.PerM3), len(ci.SizesUM))
	}
	if !(r.VolumeL > 0) || math.IsInf(r.VolumeL, 0) || r.FlowLPM < 0 || r.SampleSeconds < 0 {
		t.Fatalf("volume %g flow %g time %g", r.VolumeL, r.FlowLPM, r.SampleSeconds)
	}
	if r.Time.Location() != time.UTC || r.Time.After(testNow.Add(DefaultMaxFuture)) || r.Time.Before(testNow.Add(-in.opt.Retention)) {
		t.Fatalf("time %v out of bounds", r.Time)
	}
	switch r.Status {
	case StatusOK, StatusWarning, StatusFault:
	default:
		t.Fatalf("status %q", r.Status)
	}
	for i, c := range r.Counts {
		if c > maxCount {
			t.Fatalf("count %d beyond 2^53", c)
		}
		if math.IsNaN(r.PerM3[i]) || r.PerM3[i] < 0 || i > 0 && r.PerM3[i] > r.PerM3[i-1] {
			t.Fatalf("concentrations %v", r.PerM3)
		}
	}
}

func FuzzDecodePressure(f *testing.F) {
	f.Add([]byte(`{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12.4}`), false)
	in := newTestIngest(f, newMemSink(), IngestOptions{})
	f.Fuzz(func(t *testing.T, body []byte, ndjson bool) {
		v := in.validator()
		var got []Pressure
		seen, err := decodeBody(bytes.NewReader(body), fuzzFormat(ndjson), fuzzMaxBody, func(i int, raw *RawPressure) *InputError {
			var p Pressure
			if ie := v.pressure(i, raw, &p); ie != nil {
				return ie
			}
			got = append(got, p)
			return nil
		})
		if err != nil {
			checkDecodeErr(t, err, seen)
			return
		}
		if len(got) != seen {
			t.Fatalf("%d samples from %d elements", len(got), seen)
		}
		for i, p := range got {
			if _, ok := in.reg.Sensor(p.Sensor); !ok {
				t.Fatalf("accepted unknown sensor %q", p.Sensor)
			}
			if math.IsNaN(p.Pa) || math.IsInf(p.Pa, 0) || p.Time.Location() != time.UTC {
				t.Fatalf("sample %+v", p)
			}
			raw := p.Raw()
			var again Pressure
			if ie := v.pressure(i, &raw, &again); ie != nil || !again.Time.Equal(p.Time) || again.Pa != p.Pa || again.Sensor != p.Sensor {
				t.Fatalf("sample %d re-validates to %+v, %v; want %+v", i, again, ie, p)
			}
		}
	})
}

// FuzzStrictKeys checks the strict decoder against an independent reading
// of the same body (encoding/json's token stream): whatever it accepts
// has no key twice in an object and no key that differs from a field only
// in case.
func FuzzStrictKeys(f *testing.F) {
	f.Add([]byte(`{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12.4}`))
	f.Add([]byte(`{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12,"pa":-50}`))
	f.Add([]byte(`[{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","PA":12}]`))
	f.Fuzz(func(t *testing.T, body []byte) {
		_, err := DecodeElements(bytes.NewReader(body), false, fuzzMaxBody, func(i int, raw *RawPressure) *InputError { return nil })
		if err != nil {
			checkDecodeErr(t, err, 1<<20)
			return
		}
		dec := json.NewDecoder(bytes.NewReader(body))
		type frame struct {
			obj   bool
			key   bool // the next string token is a key
			names map[string]bool
		}
		var stack []*frame
		for {
			tok, err := dec.Token()
			if err != nil {
				return // the oracle cannot read it: nothing to compare
			}
			top := (*frame)(nil)
			if len(stack) > 0 {
				top = stack[len(stack)-1]
			}
			switch v := tok.(type) {
			case json.Delim:
				switch v {
				case '{', '[':
					if top != nil && top.obj {
						top.key = true
					}
					stack = append(stack, &frame{obj: v == '{', key: v == '{', names: map[string]bool{}})
				default:
					stack = stack[:len(stack)-1]
				}
			case string:
				if top != nil && top.obj && top.key {
					if top.names[v] {
						t.Fatalf("accepted key %q twice in %q", v, body)
					}
					top.names[v] = true
					if len(stack) == 1 {
						for _, known := range []string{"sensor", "time", "pa"} {
							if v != known && strings.EqualFold(v, known) {
								t.Fatalf("accepted case variant %q in %q", v, body)
							}
						}
					}
					top.key = false
					continue
				}
				if top != nil && top.obj {
					top.key = true
				}
			default:
				if top != nil && top.obj {
					top.key = true
				}
			}
			if len(stack) == 0 && !dec.More() {
				return
			}
		}
	})
}

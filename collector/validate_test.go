package collector

import (
	"context"
	"encoding/json"
	"errors"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"
)

// submitOne validates one JSON reading through the programmatic path.
func submitOne(t *testing.T, in *Ingest, sink *memSink, js string) (Reading, error) {
	t.Helper()
	var raw RawReading
	if err := json.Unmarshal([]byte(js), &raw); err != nil {
		t.Fatal(err)
	}
	before := len(sink.order)
	if _, err := in.SubmitReadings(context.Background(), []RawReading{raw}); err != nil {
		return Reading{}, err
	}
	if len(sink.order) != before+1 {
		t.Fatalf("reading not stored")
	}
	return sink.readings[sink.order[before]], nil
}

func closeTo(a, b float64) bool { return math.Abs(a-b) <= 1e-9*math.Max(1, math.Abs(b)) }

func TestNormalisation(t *testing.T) {
	cases := []struct {
		name      string
		js        string
		counts    []uint64
		perM3     []float64
		diff      bool
		status    string
		overRange bool
	}{
		{
			// Concentration = count × 1000 / litres (common practice, no
			// source): 1200 × 1000 / 28.3 = 42 402.826…, 310 → 10 954.063…,
			// 2 → 70.671…
			name:   "cumulative counts to concentration",
			js:     `{"counter":"pc-hood","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.3":1200,"0.5":310,"5":2}}`,
			counts: []uint64{1200, 310, 2},
			perM3:  []float64{42402.826855123676, 10954.063604240282, 70.6713780918728},
			status: StatusOK,
		},
		{
			// pc-met reports differential counts (configured mode). By hand:
			// channels 0.3–0.5, 0.5–1, 1–5, ≥5 µm hold 700, 250, 45, 5, so
			// the cumulative counts are ≥0.3: 700+250+45+5 = 1000, ≥0.5:
			// 250+45+5 = 300, ≥1: 45+5 = 50, ≥5: 5; per m³ in 2.83 L
			// (× 1000 / 2.83, common practice, no source): 353 356.890…,
			// 106 007.067…, 17 667.844…, 1 766.784…
			name:   "differential counts to cumulative concentration",
			js:     `{"counter":"pc-met","time":"2026-03-02T10:00:00Z","volume_l":2.83,"counts":{"0.3":700,"0.5":250,"1":45,"5":5}}`,
			counts: []uint64{700, 250, 45, 5},
			perM3:  []float64{353356.89045936393, 106007.06713780918, 17667.844522968197, 1766.7844522968198},
			diff:   true,
			status: StatusOK,
		},
		{
			// Mode given in the reading overrides the configured cumulative:
			// 10, 20, 2 per channel → ≥0.5: 32, ≥1: 22, ≥5: 2 in 28.3 L.
			name:   "mode in the reading wins",
			js:     `{"counter":"pc-asm-1","time":"2026-03-02T10:00:00Z","volume_l":28.3,"mode":"differential","counts":{"0.5":10,"1":20,"5":2}}`,
			counts: []uint64{10, 20, 2},
			perM3:  []float64{32000 / 28.3, 22000 / 28.3, 2000 / 28.3},
			diff:   true,
			status: StatusOK,
		},
		{
			name:   "key spellings and whole floats",
			js:     `{"counter":"pc-asm-1","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.50um":310.0," 1 µm":8e1,"5.0":2},"status":"warning"}`,
			counts: []uint64{310, 80, 2},
			perM3:  []float64{310000 / 28.3, 80000 / 28.3, 2000 / 28.3},
			status: StatusWarning,
		},
		{
			// pc-hood states a 4e6 /m³ maximum: 113 200 counts in 28.3 L is
			// exactly 4e6 /m³.
			name:      "at the counter's maximum",
			js:        `{"counter":"pc-hood","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.3":113200,"0.5":300,"5":0},"status":"fault"}`,
			counts:    []uint64{113200, 300, 0},
			perM3:     []float64{4e6, 300000 / 28.3, 0},
			status:    StatusFault,
			overRange: true,
		},
		{
			name:   "just below the counter's maximum",
			js:     `{"counter":"pc-hood","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.3":113199,"0.5":300,"5":0}}`,
			counts: []uint64{113199, 300, 0},
			perM3:  []float64{113199000 / 28.3, 300000 / 28.3, 0},
			status: StatusOK,
		},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			sink := newMemSink()
			in := newTestIngest(t, sink, IngestOptions{})
			r, err := submitOne(t, in, sink, c.js)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(r.Counts, c.counts) {
				t.Errorf("counts %v, want %v", r.Counts, c.counts)
			}
			for i := range c.perM3 {
				if !closeTo(r.PerM3[i], c.perM3[i]) {
					t.Errorf("per m³ at %g µm: %.6f, want %.6f", r.Sizes[i], r.PerM3[i], c.perM3[i])
				}
			}
			if r.Differential != c.diff || r.Status != c.status || r.OverRange != c.overRange {
				t.Errorf("differential %v status %q over-range %v, want %v %q %v", r.Differential, r.Status, r.OverRange, c.diff, c.status, c.overRange)
			}
			for i := 1; i < len(r.PerM3); i++ {
				if r.PerM3[i] > r.PerM3[i-1] {
					t.Errorf("cumulative concentration rises from %g to %g µm", r.Sizes[i-1], r.Sizes[i])
				}
			}
			cum := r.Cumulative()
			for i := range cum {
				if !closeTo(float64(cum[i])*1000/r.VolumeL, r.PerM3[i]) {
					t.Errorf("Cumulative()[%d] = %d does not match %g /m³", i, cum[i], r.PerM3[i])
				}
			}
			// The reading, sent again as it would be re-sent, validates to
			// the same reading.
			raw := r.Raw()
			var again Reading
			v := in.validator()
			if ie := v.reading(0, &raw, &again); ie != nil {
				t.Fatalf("Raw() does not re-validate: %v", ie)
			}
			if !sameReading(r, again) {
				t.Errorf("re-validated %+v, want %+v", again, r)
			}
		})
	}
}

// sameReading compares readings, times by instant.
func sameReading(a, b Reading) bool {
	if !a.Time.Equal(b.Time) {
		return false
	}
	a.Time, b.Time = time.Time{}, time.Time{}
	return reflect.DeepEqual(a, b)
}

func TestVolumeConsistency(t *testing.T) {
	reading := func(vol string) string {
		return `{"counter":"pc-asm-1","time":"2026-03-02T10:00:00Z","volume_l":` + vol + `,"flow_lpm":28.3,"sample_s":60,"counts":{"0.5":310,"1":80,"5":2}}`
	}
	// Nominal 28.3 L/min × 60 s / 60 = 28.3 L; default tolerance 10 %
	// (31.13 L at the upper edge).
	cases := []struct {
		vol string
		tol float64
		ok  bool
	}{
		{"28.3", 0, true},
		{"31.1", 0, true},
		{"31.2", 0, false},
		{"25.5", 0, true},
		{"25.4", 0, false},
		{"28.4", 0.001, false},
		// With the consistency check off, the pump's limit still holds:
		// at most 2 × 28.3 L/min × 60 s × 1.05 = 59.43 L.
		{"59.4", -1, true},
		{"100", -1, false},
	}
	for _, c := range cases {
		t.Run(c.vol, func(t *testing.T) {
			sink := newMemSink()
			in := newTestIngest(t, sink, IngestOptions{VolumeTolerance: c.tol})
			_, err := submitOne(t, in, sink, reading(c.vol))
			var ie *InputError
			switch {
			case c.ok && err != nil:
				t.Fatalf("refused: %v", err)
			case !c.ok && (!errors.As(err, &ie) || ie.Field != "volume_l"):
				t.Fatalf("error %v, want one on volume_l", err)
			}
		})
	}
}

func TestTimeBounds(t *testing.T) {
	cases := []struct {
		name      string
		time      string
		retention time.Duration
		future    time.Duration
		ok        bool
	}{
		{"now", "2026-03-02T10:01:00Z", 0, 0, true},
		{"fractional seconds", "2026-03-02T10:00:00.25Z", 0, 0, true},
		{"zone offset", "2026-03-02T11:00:00+01:00", 0, 0, true},
		{"at the future edge", "2026-03-02T10:06:00Z", 0, 0, true},
		{"past the future edge", "2026-03-02T10:06:00.001Z", 0, 0, false},
		{"wider future allowance", "2026-03-02T10:30:00Z", 0, time.Hour, true},
		{"no retention limit", "2001-01-01T00:00:00Z", -1, 0, true},
		{"inside retention", "2026-03-01T10:02:00Z", 24 * time.Hour, 0, true},
		{"outside retention", "2026-03-01T10:00:00Z", 24 * time.Hour, 0, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			sink := newMemSink()
			// A negative retention is no limit (newTestIngest fills in a zero one).
			in := newTestIngest(t, sink, IngestOptions{Retention: c.retention, MaxFuture: c.future})
			r, err := submitOne(t, in, sink, strings.Replace(good, "2026-03-02T10:00:00Z", c.time, 1))
			if c.ok != (err == nil) {
				t.Fatalf("error %v, want ok=%v", err, c.ok)
			}
			if err == nil {
				want, _ := time.Parse(time.RFC3339Nano, c.time)
				if !r.Time.Equal(want) || r.Time.Location() != time.UTC {
					t.Errorf("time %v, want %v in UTC", r.Time, want)
				}
			}
		})
	}
}

func TestInputErrorText(t *testing.T) {
	e := &InputError{Index: 3, Field: "counts.0.5", Msg: "count -1 is negative", Line: 7}
	if got, want := e.Error(), "element 3 (line 7), counts.0.5: count -1 is negative"; got != want {
		t.Errorf("%q, want %q", got, want)
	}
	e.Rule = RuleCount
	if got, want := e.Error(), "element 3 (line 7), counts.0.5: count -1 is negative [rule count-value]"; got != want {
		t.Errorf("%q, want %q", got, want)
	}
	if !errors.Is(e, ErrInput) {
		t.Error("InputError does not match ErrInput")
	}
}

func TestCountJSON(t *testing.T) {
	cases := []struct {
		in      string
		n       uint64
		problem string // substring; "" = a usable count
	}{
		{"0", 0, ""},
		{"-0", 0, ""},
		{"12", 12, ""},
		{"9007199254740992", 1 << 53, ""},
		{"1.2e3", 1200, ""},
		{"9007199254740993", 0, "beyond 2^53"},
		{"1e16", 0, "beyond 2^53"},
		{"99999999999999999999999", 0, "beyond 2^53"},
		{"2.5", 0, "not a whole number"},
		{"-3", 0, "negative"},
		{"-1e400", 0, "negative"},
		{`"7"`, 0, "not a string"},
		{"true", 0, "not a boolean"},
		{"null", 0, "not null"},
		{"[1]", 0, "not an array"},
		{`{"a":1}`, 0, "not an object"},
	}
	for _, c := range cases {
		var got Count
		if err := json.Unmarshal([]byte(c.in), &got); err != nil {
			t.Fatalf("%s: %v", c.in, err)
		}
		p := got.problem()
		if c.problem == "" && (p != "" || got.N != c.n) {
			t.Errorf("%s: %d %q, want %d", c.in, got.N, p, c.n)
		}
		if c.problem != "" && !strings.Contains(p, c.problem) {
			t.Errorf("%s: problem %q, want it to say %q", c.in, p, c.problem)
		}
		// Marshalling gives back a JSON text that decodes to the same.
		b, err := json.Marshal(got)
		if err != nil {
			t.Fatalf("%s: marshal: %v", c.in, err)
		}
		var back Count
		if err := json.Unmarshal(b, &back); err != nil || back != got {
			t.Errorf("%s: round trip %s gives %+v, want %+v", c.in, b, back, got)
		}
	}
	if p := (Count{N: 1<<53 + 1}).problem(); !strings.Contains(p, "beyond 2^53") {
		t.Errorf("programmatic count above 2^53: %q", p)
	}
}

package collector

import (
	"errors"
	"strings"
	"testing"
	"time"
)

// TestBoundsOverrides checks that configured bounds replace the defaults
// for the instruments they name and only for those.
func TestBoundsOverrides(t *testing.T) {
	reg, err := demoRegistry(t).WithBounds(Bounds{
		SensorMaxAbsPa: map[string]float64{"dp-asm-gown": 20000},
		ClockSkew:      map[string]time.Duration{"pc-asm-1": time.Hour},
		VolumeWindow:   0.2,
	})
	if err != nil {
		t.Fatal(err)
	}
	in := NewIngest(reg, newMemSink(), IngestOptions{Now: func() time.Time { return testNow }})
	v := in.validator()
	pa := func(id string, x float64) *InputError {
		var out Pressure
		return v.pressure(0, &RawPressure{Sensor: id, Time: "2026-03-02T10:00:00Z", Pa: &x}, &out)
	}
	// ±5 000 Pa by default (common practice, no source); 20 000 where configured.
	if ie := pa("dp-asm-gown", 15000); ie != nil {
		t.Errorf("configured sensor refused 15 000 Pa: %v", ie)
	}
	if ie := pa("dp-met-asm", 15000); ie == nil || ie.Rule != RulePressureRange {
		t.Errorf("other sensor took 15 000 Pa: %v", ie)
	}
	if ie := pa("dp-met-asm", -5000); ie != nil {
		t.Errorf("-5 000 Pa is at the bound: %v", ie)
	}
	rd := func(id, tm, vol string) *InputError {
		var raw RawReading
		if ie := StrictUnmarshal([]byte(strings.NewReplacer("ID", id, "TM", tm, "VOL", vol).Replace(
			`{"counter":"ID","time":"TM","volume_l":VOL,"sample_s":60,"counts":{"0.5":1,"1":0,"5":0}}`)), &raw, 0); ie != nil {
			t.Fatal(ie)
		}
		var out Reading
		return v.reading(0, &raw, &out)
	}
	if ie := rd("pc-asm-1", "2026-03-02T10:50:00Z", "28.3"); ie != nil {
		t.Errorf("an hour of skew allowed for pc-asm-1: %v", ie)
	}
	if ie := rd("pc-asm-2", "2026-03-02T10:50:00Z", "28.3"); ie == nil || ie.Rule != RuleTimeFuture {
		t.Errorf("pc-asm-2 keeps the 5 min default: %v", ie)
	}
	// Window 20 %: 28.3 × 1.2 = 33.96 L.
	if ie := rd("pc-asm-1", "2026-03-02T10:00:00Z", "33.9"); ie != nil {
		t.Errorf("33.9 L inside a 20 %% window: %v", ie)
	}
	if ie := rd("pc-asm-1", "2026-03-02T10:00:00Z", "34"); ie == nil || ie.Rule != RuleVolumeDrawable {
		t.Errorf("34 L outside a 20 %% window: %v", ie)
	}
	for _, bad := range []Bounds{{VolumeWindow: -1}, {VolumeWindow: 1}, {MaxAbsPa: -3}, {SensorMaxAbsPa: map[string]float64{"x": 0}}, {ClockSkew: map[string]time.Duration{"x": -time.Second}}} {
		if _, err := demoRegistry(t).WithBounds(bad); !errors.Is(err, ErrConfig) {
			t.Errorf("%+v: %v, want a configuration error", bad, err)
		}
	}
}

func TestTextProblem(t *testing.T) {
	cases := []struct {
		in   string
		want string // substring; "" = fine
	}{
		{"pc-asm-1", ""},
		{"Reinigung nach Türöffnung, 5 µm", ""},
		{"a\x00b", "NUL"},
		{"a\nb", "U+000A"},
		{"a\rb", "U+000D"},
		{"a\tb", "U+0009"},
		{"a\x7fb", "U+007F"},
		{"a\u0085b", "U+0085"},
		{"a\u2028b", "U+2028"},
		{"a\xffb", "invalid UTF-8"},
		{strings.Repeat("x", 4097), "more than the 4096"},
	}
	for _, c := range cases {
		got := TextProblem(c.in, 0)
		if c.want == "" && got != "" || c.want != "" && !strings.Contains(got, c.want) {
			t.Errorf("%q: %q, want %q", c.in, got, c.want)
		}
	}
	if ie := CheckText(4, "comment", "ok\x00", 0); ie == nil || ie.Index != 4 || ie.Field != "comment" || ie.Rule != RuleText {
		t.Errorf("CheckText: %+v", ie)
	}
}

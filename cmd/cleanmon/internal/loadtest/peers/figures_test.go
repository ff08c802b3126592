package peers

import (
	"bytes"
	"errors"
	"math"
	"strings"
	"testing"
	"time"
)

// TestReadingsAreWhatPeersGet: a caller that feeds cleanmon from Readings
// with Run's Options sends exactly the readings the peers were sent.
func TestReadingsAreWhatPeersGet(t *testing.T) {
	o := Options{Counters: 5, Minutes: 40, Batch: 7, Year: true, YearMinutes: 130, Seed: 3, End: time.Date(2026, 1, 2, 3, 4, 59, 0, time.UTC)}.withDefaults()
	w := buildWorkload(o)
	var got []byte
	add := func(r Reading) { got = appendLine(got, reading{counter: r.Counter, t: r.Time.Unix(), n: r.Counts}) }
	if err := Readings(o, add, add); err != nil {
		t.Fatal(err)
	}
	want := append(bytes.Join(w.live, nil), bytes.Join(w.year, nil)...)
	if !bytes.Equal(got, want) {
		t.Fatalf("Readings and the posted batches differ (%d and %d bytes)", len(got), len(want))
	}
	if !strings.HasSuffix(string(w.year[len(w.year)-1]), " "+itoa64(o.End.Add(-time.Minute).Unix())+"\n") {
		t.Errorf("the year does not end a minute before End (%s): %q", o.End, w.year[len(w.year)-1])
	}
	var again []byte
	add2 := func(r Reading) { again = appendLine(again, reading{counter: r.Counter, t: r.Time.Unix(), n: r.Counts}) }
	_ = Readings(o, add2, add2)
	if !bytes.Equal(got, again) {
		t.Error("the same Options gave different readings")
	}
}

func TestRatio(t *testing.T) {
	r := Results{Peers: []Figures{
		{Peer: nameInflux, ReadingsPerSecond: 100000, BytesPerReading: 40, YearRaw: 2 * time.Second, YearHourly: 50 * time.Millisecond},
		{Peer: nameVictoria, ReadingsPerSecond: 200000, BytesPerReading: 8}, // no year measured
	}}
	for _, c := range []struct {
		peer string
		f    Figure
		ours float64
		want float64
		err  error
	}{
		{nameInflux, ReadingsPerSecond, 150000, 1.5, nil},
		{nameInflux, BytesPerReading, 10, 0.25, nil},
		{nameInflux, YearRawSeconds, 1, 0.5, nil},
		{nameInflux, YearHourlySeconds, 0.015, 0.3, nil},
		{nameVictoria, BytesPerReading, 16, 2, nil},
		{nameVictoria, YearRawSeconds, 1, 0, ErrNoFigure},
		{"prometheus", ReadingsPerSecond, 1, 0, ErrNoFigure},
		{nameInflux, Figure(99), 1, 0, ErrNoFigure},
	} {
		got, err := r.Ratio(c.peer, c.f, c.ours)
		if !errors.Is(err, c.err) || math.Abs(got-c.want) > 1e-12 {
			t.Errorf("Ratio(%s, %d, %v) = %v, %v; want %v, %v", c.peer, c.f, c.ours, got, err, c.want, c.err)
		}
	}
	var b bytes.Buffer
	if err := r.WriteTable(&b, map[Figure]float64{ReadingsPerSecond: 150000}); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	for _, want := range []string{"1.50×", "0.75×", "—", "victoria-metrics acknowledges before"} {
		if !strings.Contains(out, want) {
			t.Errorf("table lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, " 0.000 ") {
		t.Errorf("an unmeasured figure shows as zero:\n%s", out)
	}
}

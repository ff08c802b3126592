package store

import (
	"errors"
	"testing"
	"time"
)

func TestCheckRange(t *testing.T) {
	day := 24 * time.Hour
	cases := []struct {
		name     string
		from, to time.Time
		max      time.Duration
		param    string
	}{
		{"a year", t0, t0.Add(365 * day), DefaultMaxRawRange, ""},
		{"unbounded without a limit", time.Time{}, time.Time{}, 0, ""},
		{"no from", time.Time{}, t0, DefaultMaxRawRange, "from"},
		{"no to", t0, time.Time{}, DefaultMaxRawRange, "to"},
		{"empty", t0, t0, 0, "to"},
		{"backwards", t0, t0.Add(-time.Second), 0, "to"},
		{"0001 to 9999", time.Date(1, 1, 2, 0, 0, 0, 0, time.UTC), time.Date(9999, 1, 1, 0, 0, 0, 0, time.UTC), DefaultMaxRawRange, "to"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := CheckRange(c.from, c.to, c.max)
			var re *RangeError
			switch {
			case c.param == "" && err != nil:
				t.Fatalf("refused: %v", err)
			case c.param != "" && (!errors.As(err, &re) || re.Param != c.param || !errors.Is(err, ErrRange) || !errors.Is(err, ErrInvalid)):
				t.Fatalf("%v, want a RangeError naming %q", err, c.param)
			}
		})
	}
}

// TestHugeRangeSeeks asks the store itself, unchecked, for years 0001 to
// 9999 raw and hourly: the walk seeks from record to record, so the
// answer is the data there is (a few readings), not a walk over millions
// of empty slices. The benchmark below shows it takes microseconds.
func TestHugeRangeSeeks(t *testing.T) {
	s := quick(t)
	appendOK(t, s, series("pc-asm-1", t0, 10))
	compactOK(t, s)
	appendOK(t, s, series("pc-asm-1", t0.Add(400*24*time.Hour), 10))
	from, to := time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC), time.Date(9999, 12, 31, 0, 0, 0, 0, time.UTC)
	if got := scanAll(t, s, "pc-asm-1", from, to); len(got) != 20 {
		t.Fatalf("%d readings over 0001–9999", len(got))
	}
	n := 0
	if err := s.ScanRollups("pc-asm-1", 24*time.Hour, from, to, func(Rollup) error { n++; return nil }); err != nil || n != 2 {
		t.Fatalf("%d daily rows over 0001–9999, %v", n, err)
	}
}

func BenchmarkHugeRange(b *testing.B) {
	s := quick(b)
	appendOK(b, s, series("pc-asm-1", t0, 10))
	from, to := time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC), time.Date(9999, 12, 31, 0, 0, 0, 0, time.UTC)
	for b.Loop() {
		if err := s.ScanReadings("pc-asm-1", from, to, func(Reading) error { return nil }); err != nil {
			b.Fatal(err)
		}
		if err := s.ScanRollups("pc-asm-1", time.Hour, from, to, func(Rollup) error { return nil }); err != nil {
			b.Fatal(err)
		}
	}
}

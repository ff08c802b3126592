package classify

import (
	"errors"
	"math"
	"testing"
	"time"
)

// A decay that halves every 2 minutes from 352 000 /m³, worked by hand:
// n = ln 2 / 2 per minute, 100:1 in 2 × ln 100 / ln 2 = 13.2877 min. The
// ISO 5 limit at 0.5 µm, 3 520 /m³ (ISO 14644-1:2015 Table 1), stops the
// fit before 2 750 /m³.
func TestFitRecoveryTest(t *testing.T) {
	conc := []float64{2000, 150000, 352000, 176000, 88000, 44000, 22000, 11000, 5500, 2750, 2600}
	var times []time.Time
	for i := range conc {
		times = append(times, time.Date(2026, 3, 4, 8, i, 0, 0, time.UTC))
	}
	five := 5.0
	a, err := FitRecoveryTest(times, conc, 0.5, &five)
	if err != nil {
		t.Fatal(err)
	}
	used := 0
	for _, p := range a.Series {
		if p.Used {
			used++
		}
	}
	// One minute apart here, so the rate is ln 2 per minute.
	if math.Abs(a.RatePerMin-math.Ln2) > 1e-9 || math.Abs(a.T100Min-13.2877/2) > 1e-4 || a.Points != 7 || used != 7 || a.FloorPerM3 != 3520 {
		t.Errorf("%+v", a)
	}
	for _, tc := range []struct {
		name  string
		class float64
		times []time.Time
	}{
		{"blank cell", 5, nil},           // ISO 5 has no limit at 5 µm
		{"too few points", 0, times[:2]}, // RecoveryFit needs three
	} {
		var err error
		if tc.times == nil {
			_, err = FitRecoveryTest(times, conc, 5, &tc.class)
		} else {
			_, err = FitRecoveryTest(tc.times, conc[:2], 0.5, nil)
		}
		if !errors.Is(err, ErrRecovery) {
			t.Errorf("%s: %v", tc.name, err)
		}
	}
}

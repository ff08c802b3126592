package classify

import (
	"errors"
	"math"
	"strings"
	"testing"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

// Worked by hand, ISO 14644-1:2015. ISO 5 zone of 3 m² → 2 locations
// (Table A.1, 2 < 3 ≤ 4). Sizes 0.5 and 1 µm, limits 3 520 and 832 /m³
// (Table 1). V_s = 20/832 × 1000 = 24.04 L, so 28.3 L samples are enough.
//
//	L1: one sample, 28.3 L, 50 / 10 counts → 1 766.8 / 353.4 /m³
//	L2: 28.3 L 60 / 12 → 2 120.1 / 424.0; 28.3 L 40 / 8 → 1 413.4 / 282.7;
//	    mean 1 766.8 / 353.4 /m³
//
// Every mean is within its limit: pass. Achieved class: by the means alone
// ISO 4.8 would do (at 0.5 µm 10^4.8 × 0.2^2.08 = 2 217 → 2 220 ≥ 1 766.8),
// but a class is claimed only where the samples are large enough for it:
// ISO 4.8 at 1 µm allows 10^4.8 × 0.1^2.08 = 525 /m³, so V_s = 20/525 ×
// 1000 = 38.1 L > 28.3 L; ISO 4.9 (660 /m³) needs 30.3 L; ISO 5 (832)
// needs 24.0 L. The samples support ISO 5.
func TestCertifyWorked2015(t *testing.T) {
	r, err := Certify(Target{Class: 5, AreaM2: 3, Sizes: []float64{0.5, 1}, State: InOperation}, []Sample{
		{Location: "L1", VolumeL: 28.3, Counts: []uint64{50, 10}},
		{Location: "L2", VolumeL: 28.3, Counts: []uint64{60, 12}},
		{Location: "L2", VolumeL: 28.3, Counts: []uint64{40, 8}},
	})
	if err != nil {
		t.Fatal(err)
	}
	if r.Verdict != Pass || len(r.Problems) != 0 {
		t.Fatalf("verdict %s, problems %v", r.Verdict, r.Problems)
	}
	if r.RequiredLocations != 2 || len(r.Locations) != 2 || r.Locations[1].Samples != 2 {
		t.Errorf("locations %+v", r.Locations)
	}
	for _, l := range r.Locations {
		if !near(l.MeanPerM3["0.5"], 1766.78, 0.01) || !near(l.MeanPerM3["1"], 353.36, 0.01) {
			t.Errorf("%s means %v", l.ID, l.MeanPerM3)
		}
	}
	if r.UCL95PerM3 != nil {
		t.Error("the 2015 edition has no UCL")
	}
	if r.AchievedClass == nil || *r.AchievedClass != 5 {
		t.Errorf("achieved class %v, want 5", r.AchievedClass)
	}
}

// Worked by hand, ISO 14644-1:1999. ISO 7 zone of 9 m² → √9 = 3
// locations. Sizes 0.5 and 5 µm, limits 352 000 and 2 930 /m³. One 28.3 L
// sample per location:
//
//	0.5 µm: 5 000, 7 000, 9 000 → 176 678.4, 247 349.8, 318 021.2 /m³
//	5 µm:   20, 40, 60          → 706.7, 1 413.4, 2 120.1 /m³
//
// All locations pass. Annex C, m = 3, t(0.95, 2) = 2.919986:
// 0.5 µm: M = 247 349.8, s = 70 671.4, UCL = M + 2.919986 × 70 671.4/√3
// = 366 492 > 352 000 → fail; 5 µm: UCL = 1 413.4 + 2.919986 × 706.7/√3
// = 2 604.9 ≤ 2 930. One problem, the UCL at 0.5 µm. The same samples
// under 2015 in a 6 m² zone (3 locations, no UCL) pass.
func TestCertifyWorked1999(t *testing.T) {
	samples := []Sample{
		{Location: "A", VolumeL: 28.3, Counts: []uint64{5000, 20}},
		{Location: "B", VolumeL: 28.3, Counts: []uint64{7000, 40}},
		{Location: "C", VolumeL: 28.3, Counts: []uint64{9000, 60}},
	}
	r, err := Certify(Target{Class: 7, AreaM2: 9, Sizes: []float64{0.5, 5}, Edition: Edition1999}, samples)
	if err != nil {
		t.Fatal(err)
	}
	if r.Verdict != Fail || len(r.Problems) != 1 || !strings.Contains(r.Problems[0], "UCL") {
		t.Fatalf("verdict %s problems %q", r.Verdict, r.Problems)
	}
	for _, l := range r.Locations {
		if !l.Pass {
			t.Errorf("location %s should pass on its own", l.ID)
		}
	}
	if !near(r.UCL95PerM3["0.5"], 366492, 1) || !near(r.UCL95PerM3["5"], 2604.9, 0.5) {
		t.Errorf("UCL %v", r.UCL95PerM3)
	}
	r, err = Certify(Target{Class: 7, AreaM2: 6, Sizes: []float64{0.5, 5}}, samples)
	if err != nil || r.Verdict != Pass {
		t.Errorf("2015: %v %v %v", r.Verdict, r.Problems, err)
	}
}

func TestCertifyEveryProblemListed(t *testing.T) {
	// ISO 5, 80 m² needs 16 locations (Table A.1); V_s 5.69 L at 0.5 µm.
	r, err := Certify(Target{Class: 5, AreaM2: 80, Sizes: []float64{0.3, 0.5}}, []Sample{
		{Location: "L1", VolumeL: 2, Counts: []uint64{10, 5}, Ref: "line 2"},
		{Location: "L2", VolumeL: 28.3, Counts: []uint64{900, 200}},
	})
	if err != nil {
		t.Fatal(err)
	}
	// 200 / 28.3 L = 7 067 /m³ > 3 520 at 0.5 µm; 900/28.3 = 31 802 > 10 200 at 0.3.
	// 2 L at 28.3 L/min is 0.07 min, under the minute of ISO 14644-1:2015 A.4.2.
	// The exceedances make it a fail although the plan is not met either.
	want := []string{"16", "line 2: 2.00 L", "line 2: sampled for 0.07 min", "L2: mean 31802", "L2: mean 7067"}
	if r.Verdict != Fail || len(r.Problems) != len(want) {
		t.Fatalf("problems %q", r.Problems)
	}
	for i, w := range want {
		if !strings.Contains(r.Problems[i], w) {
			t.Errorf("problem %d %q lacks %q", i, r.Problems[i], w)
		}
	}
}

func TestCertifyGradeA(t *testing.T) {
	// Grade A at rest: 3 520 /m³ at 0.5 µm, 5 µm not specified for
	// classification (EU GMP Annex 1 Table 1), and 1 m³ per location.
	r, err := Certify(Target{Grade: "A", AreaM2: 3}, []Sample{
		{Location: "A1", VolumeL: 1000, Counts: []uint64{300, 1}},
		{Location: "A2", VolumeL: 500, Counts: []uint64{100, 0}},
	})
	if err != nil {
		t.Fatal(err)
	}
	// Too little air at A2 is a plan not met, not a failure.
	if r.Verdict != Incomplete || len(r.Problems) != 1 || !strings.Contains(r.Problems[0], "A2") {
		t.Fatalf("verdict %s, problems %q", r.Verdict, r.Problems)
	}
	if r.Class != nil || r.Grade == nil || *r.Grade != "A" || r.LimitsPerM3["5"] != nil {
		t.Errorf("report %+v", r)
	}
}

func TestCertifyPoissonUpper(t *testing.T) {
	// 0 counts in 28.3 L: the mean may still be ln 20 / 28.3 L = 105.9 /m³
	// at 95 % (Poisson, exact).
	r, err := Certify(Target{Class: 7, AreaM2: 1, Sizes: []float64{0.5, 5}}, []Sample{{Location: "L", VolumeL: 28.3, Counts: []uint64{10, 0}}})
	if err != nil {
		t.Fatal(err)
	}
	if got := r.Locations[0].Upper95PerM3["5"]; !near(got, math.Log(20)*1000/28.3, 1e-6) {
		t.Errorf("upper %v", got)
	}
	// The bound and the pooled concentration come from the same totals:
	// two samples 28.3 L and 56.6 L with 3 and 3 counts pool to 6 in
	// 84.9 L = 70.67 /m³, while the criterion mean of the sample
	// concentrations is (106.0 + 53.0)/2 = 79.5 /m³. Exact Poisson 95 %
	// upper bound for 6 counts: 11.84 (chi-square 0.95 with 14 df = 23.685,
	// halved; from memory), so 11.84/84.9 L = 139.5 /m³.
	r, err = Certify(Target{Class: 7, AreaM2: 1, Sizes: []float64{0.5, 5}}, []Sample{
		{Location: "L", VolumeL: 28.3, Counts: []uint64{10, 3}},
		{Location: "L", VolumeL: 56.6, Counts: []uint64{20, 3}},
	})
	if err != nil {
		t.Fatal(err)
	}
	l := r.Locations[0]
	if !near(l.PooledPerM3["5"], 6000/84.9, 1e-9) || !near(l.MeanPerM3["5"], (3000/28.3+3000/56.6)/2, 1e-9) {
		t.Errorf("pooled %v mean %v", l.PooledPerM3["5"], l.MeanPerM3["5"])
	}
	if !near(l.Upper95PerM3["5"], 11.8424*1000/84.9, 0.01) {
		t.Errorf("upper %v, want 139.5", l.Upper95PerM3["5"])
	}
}

func TestCertifyBadInput(t *testing.T) {
	tg := Target{Class: 7, AreaM2: 9, Sizes: []float64{0.5, 5}}
	for name, s := range map[string][]Sample{
		"none":       nil,
		"volume":     {{Location: "A", VolumeL: 0, Counts: []uint64{1, 1}}},
		"counts":     {{Location: "A", VolumeL: 1, Counts: []uint64{1}}},
		"cumulative": {{Location: "A", VolumeL: 1, Counts: []uint64{1, 5}}},
		"location":   {{VolumeL: 1, Counts: []uint64{1, 1}}},
	} {
		if _, err := Certify(tg, s); !errors.Is(err, ErrSamples) {
			t.Errorf("%s: %v", name, err)
		}
	}
}

func TestRolling(t *testing.T) {
	base := mustTime(t, "2026-03-02T10:00:00Z")
	r := Rolling{Window: 10 * 60e9}
	for i := 0; i < 20; i++ {
		r.Add(base.Add(minutes(i)), float64(i))
	}
	// Window (t−10 min, t] at t = 19 min holds minutes 10..19, mean 14.5.
	m, n, ok := r.Mean(base.Add(minutes(19)))
	if !ok || n != 10 || m != 14.5 {
		t.Errorf("mean %v n %d ok %v", m, n, ok)
	}
	if _, _, ok := r.Mean(base.Add(minutes(40))); ok {
		t.Error("an empty window must not give a mean")
	}
}

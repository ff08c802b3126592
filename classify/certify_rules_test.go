package classify

import (
	"errors"
	"strings"
	"testing"
	"time"
)

// iso5 is an ISO 5 zone of 3 m² in operation at 0.5 µm: two locations
// (ISO 14644-1:2015 Table A.1, 2 < 3 ≤ 4), limit 3 520 /m³ (Table 1),
// V_s = 20/3 520 × 1000 = 5.69 L (A.4.2).
func iso5() Target {
	return Target{Class: 5, AreaM2: 3, Sizes: []float64{0.5}, State: InOperation}
}

func TestCertifyVerdicts(t *testing.T) {
	at := func(m int) time.Time { return time.Date(2026, 3, 2, 9, m, 0, 0, time.UTC) }
	for _, tc := range []struct {
		name    string
		target  Target
		samples []Sample
		verdict string
		problem string // a word of the first problem
	}{
		// Every location within its limit but one location short of Table
		// A.1: the plan is not met, so not a pass, and nothing exceeded.
		{"too few locations", iso5(), []Sample{{Location: "A", VolumeL: 28.3, Counts: []uint64{10}}},
			Incomplete, "needs at least 2"},
		// Five 12-second samples of 5.66 L at 28.3 L/min: 0.2 min each,
		// under the one minute of A.4.2 (and under V_s 5.69 L).
		{"12 s samples", iso5(), []Sample{
			{Location: "A", VolumeL: 5.66, Counts: []uint64{1}, Time: at(0)}, {Location: "A", VolumeL: 5.66, Counts: []uint64{1}, Time: at(1)},
			{Location: "A", VolumeL: 5.66, Counts: []uint64{1}, Time: at(2)}, {Location: "B", VolumeL: 5.66, Counts: []uint64{1}, Time: at(3)},
			{Location: "B", VolumeL: 5.66, Counts: []uint64{1}, Time: at(4)},
		}, Incomplete, "below the single sample volume"},
		// Volume enough, but the recorded duration is 30 s.
		{"duration_s short", iso5(), []Sample{
			{Location: "A", VolumeL: 28.3, DurationS: 30, Counts: []uint64{1}}, {Location: "B", VolumeL: 28.3, DurationS: 60, Counts: []uint64{1}},
		}, Incomplete, "0.50 min"},
		// The same volume over a full minute recorded: the minute is met
		// even though 28.3 L at the default flow would also say so.
		{"duration_s enough", iso5(), []Sample{
			{Location: "A", VolumeL: 6, DurationS: 60, Counts: []uint64{1}}, {Location: "B", VolumeL: 6, DurationS: 61, Counts: []uint64{1}},
		}, Pass, ""},
		// An exceedance (200/28.3 L = 7 067 > 3 520) with a location
		// missing is a fail: a measured mean above the limit stays one.
		{"fail wins", iso5(), []Sample{{Location: "A", VolumeL: 28.3, Counts: []uint64{200}}},
			Fail, "needs at least 2"},
		// ISO 14644-1:1999: √1 = 1 location; a single location sampled
		// needs three samples there.
		{"1999 single location", Target{Class: 7, AreaM2: 1, Sizes: []float64{0.5}, Edition: Edition1999}, []Sample{
			{Location: "A", VolumeL: 28.3, Counts: []uint64{10}}, {Location: "A", VolumeL: 28.3, Counts: []uint64{10}},
		}, Incomplete, "at least 3"},
		// The three-sample rule applies only where a single location is
		// sampled: two locations of one sample each are enough for 1 m².
		{"1999 two locations", Target{Class: 7, AreaM2: 1, Sizes: []float64{0.5}, Edition: Edition1999}, []Sample{
			{Location: "A", VolumeL: 28.3, Counts: []uint64{10}}, {Location: "B", VolumeL: 28.3, Counts: []uint64{12}},
		}, Pass, ""},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r, err := Certify(tc.target, tc.samples)
			if err != nil {
				t.Fatal(err)
			}
			if r.Verdict != tc.verdict {
				t.Fatalf("verdict %s, want %s; problems %q", r.Verdict, tc.verdict, r.Problems)
			}
			if tc.problem == "" && len(r.Problems) != 0 {
				t.Errorf("problems %q", r.Problems)
			}
			if tc.problem != "" && (len(r.Problems) == 0 || !strings.Contains(r.Problems[0], tc.problem)) {
				t.Errorf("problems %q, want the first to mention %q", r.Problems, tc.problem)
			}
			if tc.verdict != Pass && r.AchievedClass != nil && tc.verdict == Incomplete {
				t.Errorf("an incomplete plan must not claim a class, got %v", *r.AchievedClass)
			}
		})
	}
}

func TestCertifyRepeatedRows(t *testing.T) {
	at := time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC)
	a := Sample{Location: "A", SampleID: "1", VolumeL: 28.3, Counts: []uint64{10}, Time: at, Ref: "f.csv line 2"}
	b := Sample{Location: "B", SampleID: "1", VolumeL: 28.3, Counts: []uint64{30}, Time: at, Ref: "f.csv line 3"}
	again := a
	again.Ref = "f.csv line 4"
	r, err := Certify(iso5(), []Sample{a, b, again})
	if err != nil {
		t.Fatal(err)
	}
	if r.Locations[0].Samples != 1 || len(r.Departures) != 1 || !strings.Contains(r.Departures[0], "line 4 repeats f.csv line 2") {
		t.Fatalf("samples %d, departures %q", r.Locations[0].Samples, r.Departures)
	}
	if r.Verdict != Incomplete {
		t.Errorf("a departure keeps the verdict from passing: %s", r.Verdict)
	}
	// Same location and sample number, other counts: which is right is
	// unknown, so the input is refused naming both rows.
	other := a
	other.Counts = []uint64{11}
	other.Ref = "f.csv line 5"
	_, err = Certify(iso5(), []Sample{a, b, other})
	if !errors.Is(err, ErrSamples) || !strings.Contains(err.Error(), "line 2") || !strings.Contains(err.Error(), "line 5") {
		t.Errorf("conflicting repeat: %v", err)
	}
	// Without sample id and time two equal rows are two real samples.
	plain := []Sample{{Location: "A", VolumeL: 28.3, Counts: []uint64{1}}, {Location: "A", VolumeL: 28.3, Counts: []uint64{1}}, {Location: "B", VolumeL: 28.3, Counts: []uint64{1}}}
	if r, err := Certify(iso5(), plain); err != nil || r.Locations[0].Samples != 2 || len(r.Departures) != 0 {
		t.Errorf("untimed rows: %v %+v", err, r.Departures)
	}
}

func TestCertifyLocationCase(t *testing.T) {
	_, err := Certify(iso5(), []Sample{
		{Location: "A1", VolumeL: 28.3, Counts: []uint64{1}, Ref: "line 2"},
		{Location: "a1", VolumeL: 28.3, Counts: []uint64{1}, Ref: "line 3"},
	})
	if !errors.Is(err, ErrSamples) || !strings.Contains(err.Error(), `"a1"`) || !strings.Contains(err.Error(), `"A1"`) {
		t.Errorf("ids differing in case: %v", err)
	}
}

// Zero counts in one 28.3 L sample per location at 0.5 and 5 µm, target
// ISO 7 (2015). Achieved class by hand: a class needs a cell at both sizes
// and V_s ≤ 28.3 L at 5 µm, i.e. a 5 µm limit ≥ 20/28.3 × 1000 = 706.7 /m³.
// Integer classes below 6 have a Table 1 blank at 5 µm; ISO 6 gives 293
// (V_s 68.4 L); ISO 6.3 gives 10^6.3 × 0.02^2.08 = 583.6 → 584 (34.2 L);
// ISO 6.4 gives 734.8 → 735 (27.2 L). So ISO 6.4, not ISO 1.
func TestCertifyAchievedClassNeedsCellsAndVolume(t *testing.T) {
	r, err := Certify(Target{Class: 7, AreaM2: 2, Sizes: []float64{0.5, 5}}, []Sample{
		{Location: "A", VolumeL: 28.3, Counts: []uint64{0, 0}},
	})
	if err != nil || r.Verdict != Pass {
		t.Fatalf("%v %s %q", err, r.Verdict, r.Problems)
	}
	if r.AchievedClass == nil || *r.AchievedClass != 6.4 {
		t.Errorf("achieved class %v, want 6.4", r.AchievedClass)
	}
}

func TestPlanWarnsCloseSizes(t *testing.T) {
	// Each larger size at least 1.5 × the next smaller (ISO 14644-1:2015
	// clause 4, from memory): 0.3/0.2 = 1.5 is fine, 0.4/0.3 = 1.33 is not.
	p, err := MakePlan(Target{Class: 5, AreaM2: 3, Sizes: []float64{0.2, 0.3, 0.4}})
	if err != nil {
		t.Fatal(err)
	}
	notes := strings.Join(p.Notes, "|")
	if !strings.Contains(notes, "0.3 µm and 0.4 µm are closer") || strings.Contains(notes, "0.2 µm and 0.3 µm") {
		t.Errorf("notes %q", p.Notes)
	}
}

func TestCertifyInstruments(t *testing.T) {
	day := func(d int) time.Time { return time.Date(2026, 3, d, 0, 0, 0, 0, time.UTC) }
	ins := []Instrument{
		{ID: "pc-1", Model: "M1", Serial: "S-100", CalibrationDue: day(2)},
		{ID: "pc-2", Model: "M1", Serial: "S-200", CalibrationDue: day(1)},
	}
	mk := func(loc, counter string, tm time.Time) Sample {
		return Sample{Location: loc, Counter: counter, Time: tm, VolumeL: 28.3, Counts: []uint64{1}, Ref: loc}
	}
	// Sampled on the due date of pc-1: covered.
	r, err := CertifyWith(iso5(), []Sample{mk("A", "PC-1", day(2).Add(23*time.Hour)), mk("B", "pc-1", day(2))}, Options{Instruments: ins})
	if err != nil || r.Verdict != Pass || len(r.Departures) != 0 {
		t.Fatalf("within calibration: %v %s %q", err, r.Verdict, r.Departures)
	}
	// pc-2 was due on 1 March and samples on 2 March; pc-9 is unknown.
	r, err = CertifyWith(iso5(), []Sample{mk("A", "pc-2", day(2).Add(time.Hour)), mk("B", "pc-9", day(2))}, Options{Instruments: ins})
	if err != nil {
		t.Fatal(err)
	}
	d := strings.Join(r.Departures, "|")
	if r.Verdict != Incomplete || !strings.Contains(d, "pc-2 (serial S-200) was past its calibration due date 2026-03-01") || !strings.Contains(d, "pc-9") {
		t.Errorf("verdict %s departures %q", r.Verdict, r.Departures)
	}
}

func TestCertifyReportsEverySample(t *testing.T) {
	x, y := 1.5, 0.75
	tm := time.Date(2026, 3, 2, 9, 0, 0, 0, time.FixedZone("CET", 3600))
	r, err := CertifyWith(iso5(), []Sample{
		{Location: "A", VolumeL: 28.3, Counts: []uint64{50}, Counter: "pc-1", SampleID: "1", Time: tm, XM: &x, YM: &y, Ref: "f line 2"},
		{Location: "B", VolumeL: 28.3, Counts: []uint64{30}, DurationS: 60, Ref: "f line 3"},
	}, Options{})
	if err != nil {
		t.Fatal(err)
	}
	a := r.Locations[0]
	if a.XM == nil || *a.XM != 1.5 || *a.YM != 0.75 || len(a.SampleResults) != 1 {
		t.Fatalf("location %+v", a)
	}
	s := a.SampleResults[0]
	// 50 particles in 28.3 L = 1 766.78 /m³; 28.3 L at 28.3 L/min = 1 min.
	if s.Counter != "pc-1" || s.Sample != "1" || s.Time == nil || s.Time.Location() != time.UTC || s.Counts["0.5"] != 50 ||
		!near(s.PerM3["0.5"], 1766.78, 0.01) || s.Minutes != 1 || s.MinutesFrom != "volume_and_flow" {
		t.Errorf("sample %+v", s)
	}
	if b := r.Locations[1].SampleResults[0]; b.MinutesFrom != "duration_s" || b.Minutes != 1 {
		t.Errorf("sample B %+v", b)
	}
	if r.Designation != "ISO Class 5; in operation; 0.5 µm" {
		t.Errorf("designation %q", r.Designation)
	}
}

func TestCertifyCoordinatesAndNotes(t *testing.T) {
	x1, y1, x2 := 1.0, 1.0, 2.0
	r, err := Certify(Target{Class: 6.5, AreaM2: 2, Sizes: []float64{0.5}}, []Sample{
		{Location: "A", VolumeL: 28.3, Counts: []uint64{10}, XM: &x1, YM: &y1, Ref: "line 2"},
		{Location: "A", VolumeL: 28.3, Counts: []uint64{10}, XM: &x2, YM: &y1, Ref: "line 3"},
	})
	if err != nil {
		t.Fatal(err)
	}
	w := strings.Join(r.Warnings, "|")
	// The first coordinates stand; the second pair is named. ISO 6.5 at
	// 0.5 µm is no Table 1 cell: 10^6.5 × 0.2^2.08 = 111 210 → 111 000 by
	// the formula, and the plan says so.
	if *r.Locations[0].XM != 1 || !strings.Contains(w, "line 3: coordinates (2, 1) m differ") || !strings.Contains(w, "limit 111000 /m³ by the class formula") {
		t.Errorf("warnings %q", r.Warnings)
	}
	if d := Designation(Target{Grade: "B", State: InOperation, Sizes: GMPSizes}, nil); d != "EU GMP grade B; in operation; 0.5 µm, 5 µm" {
		t.Errorf("designation %q", d)
	}
}

package classify

import (
	"math"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"
)

// Sequential sampling lines, ISO 14644-1:2015 Annex D (from memory: check
// the lines against the standard): upper 3.96 + 1.03·E, lower
// −3.96 + 1.03·E, stop at E = 20. Limit 83 /m³ (ISO 4 at 1 µm, Table 1);
// each step adds 28.3 L, so E grows by 83 × 0.0283 = 2.3489 a step.
func TestSequentialDecide(t *testing.T) {
	const lim = 83
	steps := func(counts ...uint64) []SequentialStep {
		out := make([]SequentialStep, len(counts))
		for i, c := range counts {
			out[i] = SequentialStep{VolumeL: 28.3 * float64(i+1), Count: c}
		}
		return out
	}
	for _, tc := range []struct {
		name     string
		counts   []uint64
		decision string
		step     int
		reason   string
	}{
		// E = 2.3489: lower −1.54, nothing below; E = 4.6978: lower
		// −3.96 + 4.8387 = 0.879 > 0 → pass at step 2 (56.6 L).
		{"clean", []uint64{0, 0, 0}, Pass, 2, "below the lower line"},
		// Upper at E = 2.3489 is 3.96 + 2.4194 = 6.379; 7 > 6.379.
		{"dirty", []uint64{7}, Fail, 1, "above the upper line"},
		// Counts that follow E stay between the lines until E = 9 ×
		// 2.3489 = 21.14 ≥ 20; 21 ≤ 21.14 is within the limit.
		{"at limit, within", []uint64{2, 5, 7, 9, 12, 14, 16, 19, 21}, Pass, 9, "E reached 21.14"},
		// The same with 22 at the end: above E, below the upper 25.73.
		{"at limit, above", []uint64{2, 5, 7, 9, 12, 14, 16, 19, 22}, Fail, 9, "above the limit"},
		{"undecided", []uint64{2, 5, 7}, Incomplete, 3, "between the lines"},
	} {
		r, err := SequentialDecide(lim, steps(tc.counts...))
		if err != nil {
			t.Fatal(err)
		}
		if r.Decision != tc.decision || r.Step != tc.step || !strings.Contains(r.Reason, tc.reason) {
			t.Errorf("%s: %+v", tc.name, r)
		}
	}
	lo, up := SequentialLines(20)
	if math.Abs(lo-16.64) > 1e-9 || math.Abs(up-24.56) > 1e-9 {
		t.Errorf("lines at E = 20: %v, %v; want 16.64, 24.56", lo, up)
	}
	if _, err := SequentialDecide(lim, []SequentialStep{{VolumeL: 10, Count: 5}, {VolumeL: 20, Count: 4}}); err == nil {
		t.Error("a falling cumulative count must be refused")
	}
}

func TestAdviseSequential(t *testing.T) {
	// ISO 1 at 0.1 µm: 10 /m³ (Table 1) → V_s = 20/10 × 1000 = 2 000 L,
	// 2 000/28.3 = 70.67 min (rounded up 70.68). A clean location passes
	// once E > 3.96/1.03 = 3.8447: 384.47 L, 13.59 min. Saved 57.09 min.
	a := AdviseSequential(10, 28.3)
	if !a.Suggested || a.FullMinutes != 70.68 || a.EarliestPassMinutes != 13.59 || math.Abs(a.SavedMinutes-57.09) > 1e-9 {
		t.Errorf("advice %+v", a)
	}
	// ISO 5 at 0.5 µm: 5.69 L, a minute: nothing to gain.
	if a := AdviseSequential(3520, 28.3); a.Suggested {
		t.Errorf("advice %+v", a)
	}
	p, err := MakePlan(Target{Class: 1, AreaM2: 2, Sizes: []float64{0.1}})
	if err != nil || p.Sequential == nil || !p.Sequential.Suggested {
		t.Errorf("plan for ISO 1: %+v %v", p.Sequential, err)
	}
}

func TestCertifySequential(t *testing.T) {
	// ISO 4 at 1 µm, 2 m² → 1 location (Table A.1). V_s 241 L, but with
	// sequential sampling two clean 28.3 L samples pass (see above) and a
	// location counting 7 in its first 28.3 L fails.
	at := func(m int) time.Time { return time.Date(2026, 3, 2, 9, m, 0, 0, time.UTC) }
	tg := Target{Class: 4, AreaM2: 2, Sizes: []float64{1}}
	clean := []Sample{
		{Location: "A", VolumeL: 28.3, Counts: []uint64{0}, Time: at(1)},
		{Location: "A", VolumeL: 28.3, Counts: []uint64{0}, Time: at(0)},
	}
	r, err := CertifyWith(tg, clean, Options{Sequential: true})
	if err != nil || r.Verdict != Pass || r.Locations[0].Sequential["1"].Step != 2 {
		t.Fatalf("%v %s %q %+v", err, r.Verdict, r.Problems, r.Locations)
	}
	if r, _ := Certify(tg, clean); r.Verdict != Incomplete {
		t.Errorf("without sequential sampling 28.3 L < 241 L is a plan not met: %s", r.Verdict)
	}
	r, err = CertifyWith(tg, []Sample{{Location: "A", VolumeL: 28.3, Counts: []uint64{7}}}, Options{Sequential: true})
	if err != nil || r.Verdict != Fail || !strings.Contains(r.Problems[0], "Annex D") {
		t.Errorf("%v %s %q", err, r.Verdict, r.Problems)
	}
}

func TestMacroDescriptor(t *testing.T) {
	// ISO 14644-1:2015 Annex C writes the descriptor "ISO M (a; b); c".
	for _, tc := range []struct{ in, out string }{
		{"ISO M (10 000; >5 µm); time-of-flight aerosol spectrometer", "ISO M (10 000; >5 µm); time-of-flight aerosol spectrometer"},
		{"M(1000; 10 µm to 20 µm); microscopy", "ISO M (1 000; 10 µm to 20 µm); microscopy"},
		{"M (25000; >=10um); LSAPC", "ISO M (25 000; ≥10 µm); LSAPC"},
	} {
		m, err := ParseMacro(tc.in)
		if err != nil || m.String() != tc.out {
			t.Errorf("%q → %q, %v; want %q", tc.in, m.String(), err, tc.out)
			continue
		}
		back, err := ParseMacro(m.String())
		if err != nil || back != m {
			t.Errorf("round trip of %q: %+v %v", tc.out, back, err)
		}
	}
	for _, bad := range []string{"", "ISO 5", "M (1,000; >5 µm); x", "M (1000; 3 µm); x", "M (1000; 5 µm); x", "M (1000; ≥5 µm); x", "M (1000; >5 µm)", "M (1000; >5 µm); ", "M (-3; >5 µm); x", "M (1000; 20 µm to 10 µm); x"} {
		if _, err := ParseMacro(bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
	m, _ := ParseMacro("M (10000; >5 µm); LSAPC")
	if d := Designation(Target{Class: 5, State: AtRest, Sizes: []float64{0.3, 0.5}}, &m); d != "ISO Class 5; at rest; 0.3 µm, 0.5 µm; ISO M (10 000; >5 µm); LSAPC" {
		t.Errorf("designation %q", d)
	}
}

func TestRecoveryFit(t *testing.T) {
	// A decay computed by hand: C0 = 352 000 /m³ (100 × ISO 5 at 0.5 µm),
	// n = 0.4 /min, C(t) = 352 000·e^(−0.4t): t = 0 → 352 000, 1 →
	// 235 953, 2 → 158 164, 3 → 106 020, 4 → 71 068, 5 → 47 638, 6 →
	// 31 933, 7 → 21 405, 8 → 14 348, 9 → 9 618; the 100:1 time is
	// ln 100 / 0.4 = 11.513 min. The series starts with two rising points
	// (the challenge) and ends at a 3 520 /m³ floor that must be left out.
	ts := []float64{-2, -1, 0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11}
	cs := []float64{1000, 200000, 352000, 235953, 158164, 106020, 71068, 47638, 31933, 21405, 14348, 9618, 3520, 3400}
	r, err := RecoveryFit(ts, cs, 3520)
	if err != nil {
		t.Fatal(err)
	}
	if r.Points != 10 || r.FromMin != 0 || r.ToMin != 9 {
		t.Errorf("points %d from %v to %v; want 10 from 0 to 9", r.Points, r.FromMin, r.ToMin)
	}
	if math.Abs(r.RatePerMin-0.4) > 1e-4 || math.Abs(r.T100Min-11.513) > 0.005 || r.RSquared < 0.99999 {
		t.Errorf("fit %+v; want n 0.4 /min, 100:1 in 11.51 min", r)
	}
	// Outside reference: gonum's least-squares line through the ten
	// (t, ln C) points used.
	logs := make([]float64, 10)
	for i := range logs {
		logs[i] = math.Log(cs[i+2])
	}
	alpha, beta := stat.LinearRegression(ts[2:12], logs, nil, false)
	if math.Abs(r.RatePerMin+beta) > 1e-12 || math.Abs(r.C0PerM3-math.Exp(alpha)) > 1e-6*r.C0PerM3 ||
		math.Abs(r.RSquared-stat.RSquared(ts[2:12], logs, nil, alpha, beta)) > 1e-12 {
		t.Errorf("fit %+v, gonum slope %v intercept %v", r, beta, alpha)
	}
	if _, err := RecoveryFit([]float64{0, 1, 2}, []float64{100, 50, 1}, 60); err == nil {
		t.Error("a fit on fewer than 3 points must be refused")
	}
	if _, err := RecoveryFit([]float64{0, 2, 1}, []float64{100, 50, 25}, 0); err == nil {
		t.Error("times out of order must be refused")
	}
}

func TestLayout(t *testing.T) {
	// Centres of equal sections (ISO 14644-1:2015 A.4.1, from memory),
	// worked by hand.
	for _, tc := range []struct {
		l, w float64
		n    int
		want []Point
	}{
		{4, 4, 4, []Point{{1, 1}, {1, 3}, {3, 1}, {3, 3}}},
		{3, 1, 3, []Point{{0.5, 0.5}, {1.5, 0.5}, {2.5, 0.5}}},
		// 5 in a 6 × 3: √(5·2) = 3.16 → 3 columns of 2, 2, 1 sections,
		// 2.4, 2.4 and 1.2 m wide; every section 3.6 m².
		{6, 3, 5, []Point{{1.2, 0.75}, {1.2, 2.25}, {3.6, 0.75}, {3.6, 2.25}, {5.4, 1.5}}},
	} {
		got, err := Layout(tc.l, tc.w, tc.n)
		if err != nil || len(got) != len(tc.want) {
			t.Fatalf("%v×%v n=%d: %v %v", tc.l, tc.w, tc.n, got, err)
		}
		for i := range got {
			if math.Abs(got[i].XM-tc.want[i].XM) > 1e-9 || math.Abs(got[i].YM-tc.want[i].YM) > 1e-9 {
				t.Errorf("%v×%v n=%d: %v, want %v", tc.l, tc.w, tc.n, got, tc.want)
				break
			}
		}
	}
	// 10 m × 6 m = 60 m² → 12 locations (Table A.1, 56 < 60 ≤ 64).
	p, err := PlanLayout(10, 6, Edition2015)
	if err != nil || len(p) != 12 {
		t.Errorf("plan layout %d %v", len(p), err)
	}
	if _, err := Layout(0, 3, 2); err == nil {
		t.Error("zero length accepted")
	}
}

func TestFEDLabel(t *testing.T) {
	// FED-STD-209E Class 1 ≈ ISO 3 … 100 000 ≈ ISO 8 (1 m³ = 35.3147 ft³;
	// from memory, cancelled 2001); ISO 9 and intermediate classes match
	// none of the six English names.
	for class, want := range map[float64]string{3: "Class 1", 5: "Class 100", 8: "Class 100 000", 9: "", 5.5: "", 1: ""} {
		if got := FEDLabel(class); got != want {
			t.Errorf("FEDLabel(%v) = %q, want %q", class, got, want)
		}
	}
}

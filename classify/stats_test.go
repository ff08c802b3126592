package classify

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// The outside reference for every distribution here is gonum, a
// general-purpose numerical library independent of this project.

func TestStudentTQuantileAgainstGonum(t *testing.T) {
	for _, nu := range []float64{1, 2, 3, 4, 5, 6, 7, 8, 9, 12, 30, 100, 0.5, 2.5} {
		for _, p := range []float64{0.5, 0.9, 0.95, 0.975, 0.99, 0.05, 0.001} {
			got, err := StudentTQuantile(p, nu)
			if err != nil {
				t.Fatal(err)
			}
			want := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Quantile(p)
			if math.Abs(got-want) > 1e-9*math.Max(1, math.Abs(want)) {
				t.Errorf("t(%v, %v) = %.12g, gonum %.12g", p, nu, got, want)
			}
		}
	}
}

func TestStudentTMatches1999Table(t *testing.T) {
	// ISO 14644-1:1999 Annex C, t(0.95, m−1) rounded to one decimal for
	// m = 2..9 locations (from memory).
	table := []float64{6.3, 2.9, 2.4, 2.1, 2.0, 1.9, 1.9, 1.9}
	for i, want := range table {
		m := i + 2
		got, _ := StudentTQuantile(0.95, float64(m-1))
		if r := math.Round(got*10) / 10; r != want {
			t.Errorf("m=%d: t=%v rounds to %v, the 1999 table has %v", m, got, r, want)
		}
	}
}

func TestStudentTBadArgs(t *testing.T) {
	for _, a := range [][2]float64{{0, 3}, {1, 3}, {0.95, 0}, {0.95, -2}, {math.NaN(), 3}} {
		if _, err := StudentTQuantile(a[0], a[1]); err == nil {
			t.Errorf("StudentTQuantile(%v, %v) should fail", a[0], a[1])
		}
	}
}

func TestRegIncBetaAgainstGonum(t *testing.T) {
	for _, a := range []float64{0.5, 1, 2.5, 10, 50} {
		for _, b := range []float64{0.5, 1, 3, 20} {
			for _, x := range []float64{0.001, 0.1, 0.5, 0.77, 0.999} {
				got, want := RegIncBeta(a, b, x), mathext.RegIncBeta(a, b, x)
				if math.Abs(got-want) > 1e-12 {
					t.Errorf("I_%v(%v,%v) = %v, gonum %v", x, a, b, got, want)
				}
			}
		}
	}
}

func TestPoissonUpperAgainstGonum(t *testing.T) {
	for _, k := range []uint64{0, 1, 2, 5, 10, 29, 100, 2000} {
		up, err := PoissonUpper(k, 0.95)
		if err != nil {
			t.Fatal(err)
		}
		// At the upper 95 % bound, observing k or fewer has probability 5 %.
		if p := (distuv.Poisson{Lambda: up}).CDF(float64(k)); math.Abs(p-0.05) > 1e-9 {
			t.Errorf("k=%d: upper=%v, gonum CDF there %v, want 0.05", k, up, p)
		}
		if got, want := PoissonCDF(k, 3.7), (distuv.Poisson{Lambda: 3.7}).CDF(float64(k)); math.Abs(got-want) > 1e-12 {
			t.Errorf("PoissonCDF(%d, 3.7) = %v, gonum %v", k, got, want)
		}
	}
	// k = 0: P(0) = e^−λ = 0.05 gives λ = ln 20 ≈ 2.996 (the Poisson formula).
	up, _ := PoissonUpper(0, 0.95)
	if math.Abs(up-math.Log(20)) > 1e-9 {
		t.Errorf("upper bound for 0 counts = %v, want ln 20", up)
	}
	if _, err := PoissonUpper(3, 1); err == nil {
		t.Error("confidence 1 must be refused")
	}
}

func TestMeanStdDevAgainstGonum(t *testing.T) {
	v := []float64{3010, 2200, 2890, 3300, 1250.5}
	if got, want := Mean(v), stat.Mean(v, nil); math.Abs(got-want) > 1e-9 {
		t.Errorf("Mean = %v, gonum %v", got, want)
	}
	if got, want := StdDev(v), stat.StdDev(v, nil); math.Abs(got-want) > 1e-9 {
		t.Errorf("StdDev = %v, gonum %v", got, want)
	}
	if !math.IsNaN(Mean(nil)) || !math.IsNaN(StdDev([]float64{1})) {
		t.Error("undefined statistics must be NaN")
	}
}

func TestUCL95(t *testing.T) {
	// Worked by hand: means 100, 200, 300 → M = 200, s = 100, m = 3,
	// t(0.95, 2) = 2.919986 → UCL = 200 + 2.919986 × 100/√3 = 368.585.
	got, err := UCL95([]float64{100, 200, 300})
	if err != nil || math.Abs(got-368.585) > 0.001 {
		t.Fatalf("UCL95 = %v, %v; want 368.585", got, err)
	}
	if _, err := UCL95([]float64{1}); err == nil {
		t.Error("UCL of one location must be refused")
	}
}

func TestRecoveryRate(t *testing.T) {
	// ISO 14644-3 recovery: C = C0·e^(−n·t); with n = 0.5 /min the 100:1
	// time is ln(100)/0.5 = 9.21 min.
	var ts, cs []float64
	for i := 0; i <= 10; i++ {
		tm := float64(i)
		ts = append(ts, tm)
		cs = append(cs, 352000*math.Exp(-0.5*tm)*(1+0.02*math.Sin(tm*7)))
	}
	got, err := RecoveryRate(ts, cs)
	if err != nil {
		t.Fatal(err)
	}
	// Outside reference: gonum's least-squares line through (t, ln C).
	logs := make([]float64, len(cs))
	for i, c := range cs {
		logs[i] = math.Log(c)
	}
	alpha, beta := stat.LinearRegression(ts, logs, nil, false)
	if math.Abs(got.RatePerMin+beta) > 1e-9 || math.Abs(got.C0PerM3-math.Exp(alpha)) > 1e-6*got.C0PerM3 {
		t.Errorf("fit %+v, gonum slope %v intercept %v", got, beta, alpha)
	}
	if r2 := stat.RSquared(ts, logs, nil, alpha, beta); math.Abs(got.RSquared-r2) > 1e-9 {
		t.Errorf("R² %v, gonum %v", got.RSquared, r2)
	}
	if math.Abs(got.T100Min-math.Log(100)/got.RatePerMin) > 1e-12 || math.Abs(got.RatePerMin-0.5) > 0.01 {
		t.Errorf("rate %v t100 %v", got.RatePerMin, got.T100Min)
	}
	if _, err := RecoveryRate([]float64{0, 1}, []float64{10, 20}); err == nil {
		t.Error("a rising concentration has no recovery rate")
	}
	if _, err := RecoveryRate([]float64{0, 1}, []float64{10, 0}); err == nil {
		t.Error("zero concentration cannot be fitted on a log scale")
	}
}

func TestCountsConversion(t *testing.T) {
	// Cumulative = sum of the channel and every larger one (definition of
	// cumulative counts, common practice, no source).
	cum := CumulativeFromDifferential([]uint64{900, 300, 8})
	if cum[0] != 1208 || cum[1] != 308 || cum[2] != 8 {
		t.Fatalf("cumulative %v", cum)
	}
	diff, err := DifferentialFromCumulative(cum)
	if err != nil || diff[0] != 900 || diff[1] != 300 || diff[2] != 8 {
		t.Fatalf("round trip %v %v", diff, err)
	}
	if _, err := DifferentialFromCumulative([]uint64{10, 20}); err == nil {
		t.Error("cumulative counts increasing with size must be refused")
	}
	// counts × 1000 / litres (1 m³ = 1000 L).
	if got := PerCubicMetre(100, 28.3); math.Abs(got-3533.57) > 0.01 {
		t.Errorf("PerCubicMetre = %v", got)
	}
}

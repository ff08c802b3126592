package alerts

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

func TestBaselineByHand(t *testing.T) {
	cases := []struct {
		name          string
		counts        []float64
		samples, skip int
		centre, ucl   float64
	}{
		// c̄ = (3+5+4+6+2)/5 = 4; UCL = 4 + 3·√4 = 10 (by hand).
		{"five samples", []float64{3, 5, 4, 6, 2}, 5, 0, 4, 10},
		// c̄ = 0.5; UCL = 0.5 + 3·√0.5 = 0.5 + 2.1213… = 2.6213… (by hand).
		{"low counts", []float64{0, 1, 0, 1}, 4, 0, 0.5, 0.5 + 3*math.Sqrt(0.5)},
		// All zero: c̄ = 0 and UCL = 0, any particle is above the centre.
		{"clean", []float64{0, 0, 0}, 3, 0, 0, 0},
		// Values that are no counts are skipped: c̄ = (9+16)/2 = 12.5.
		{"skips no counts", []float64{9, -1, math.NaN(), 16, math.Inf(1)}, 2, 3, 12.5, 12.5 + 3*math.Sqrt(12.5)},
		{"nothing", nil, 0, 0, 0, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cl := Baseline(c.counts)
			if cl.Samples != c.samples || cl.Skipped != c.skip || math.Abs(cl.Centre-c.centre) > 1e-12 || math.Abs(cl.UCL-c.ucl) > 1e-12 {
				t.Fatalf("Baseline(%v) = %+v, want samples %d skipped %d centre %v UCL %v", c.counts, cl, c.samples, c.skip, c.centre, c.ucl)
			}
		})
	}
}

// The UCL is the Poisson mean plus three Poisson standard deviations,
// checked against gonum's Poisson distribution: its mean and standard
// deviation at λ = c̄, and its tail beyond the UCL, which for 3 sigma of a
// Poisson count stays below 1 % for λ ≥ 1.
func TestBaselineAgainstGonumPoisson(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	for _, lambda := range []float64{1, 4, 25, 350} {
		src := distuv.Poisson{Lambda: lambda, Src: rng}
		counts := make([]float64, 500)
		for i := range counts {
			counts[i] = src.Rand()
		}
		cl := Baseline(counts)
		mean := stat.Mean(counts, nil)
		ref := distuv.Poisson{Lambda: mean}
		if math.Abs(cl.Centre-ref.Mean()) > 1e-9*mean {
			t.Errorf("λ %v: centre %v, gonum mean %v", lambda, cl.Centre, ref.Mean())
		}
		if want := ref.Mean() + 3*ref.StdDev(); math.Abs(cl.UCL-want) > 1e-9*want {
			t.Errorf("λ %v: UCL %v, gonum mean + 3 sd %v", lambda, cl.UCL, want)
		}
		if tail := ref.Survival(math.Floor(cl.UCL)); tail > 0.01 {
			t.Errorf("λ %v: P(X > UCL %v) = %v, want < 1 %%", lambda, cl.UCL, tail)
		}
	}
}

package alerts

import "math"

// ControlLimits are the centre line and upper control limit of a c chart
// (counts of particles per sample) for one location and size.
//
// Particle counts in a fixed sampled volume are modelled as Poisson, whose
// variance equals its mean, so the 3-sigma upper control limit is
// c̄ + 3√c̄. Real counts are often more scattered than Poisson (bursts from
// people and machines), so a single sample above the UCL is frequent and is
// not alarmed by itself. Nor is a run on one side of the centre line: a
// cleanroom's background wanders slowly (each minute's count is strongly
// correlated with the last), so such runs come every hour or so. The
// engine's trend rule is a steady rise, TrendRun samples each higher than
// the one before, ending above the centre line plus twice the baseline's
// spread and at least halfway to the lowest level. The baseline of each
// sample is the TrendBaseline samples before the current rise, so the rise
// itself does not lift its own centre line.
type ControlLimits struct {
	// Samples is how many counts the limits rest on, Skipped how many
	// values were no counts (negative, NaN or infinite). With no samples
	// Centre and UCL are 0 and mean nothing.
	Samples int `json:"samples"`
	Skipped int `json:"skipped"`
	// Centre is c̄, the mean count per sample; UCL is c̄ + 3√c̄.
	Centre float64 `json:"centre"`
	UCL    float64 `json:"ucl"`
}

// Baseline computes the c-chart limits of counts per sample.
func Baseline(counts []float64) ControlLimits {
	var cl ControlLimits
	var sum float64
	for _, c := range counts {
		if math.IsNaN(c) || math.IsInf(c, 0) || c < 0 {
			cl.Skipped++
			continue
		}
		sum += c
		cl.Samples++
	}
	if cl.Samples == 0 {
		return cl
	}
	cl.Centre = sum / float64(cl.Samples)
	cl.UCL = cl.Centre + 3*math.Sqrt(cl.Centre)
	return cl
}

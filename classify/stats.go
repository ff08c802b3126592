package classify

import (
	"errors"
	"fmt"
	"math"
)

// ErrStats reports arguments a statistic cannot be computed from.
var ErrStats = errors.New("classify: statistic undefined")

// Mean is the arithmetic mean; it is NaN for no values.
func Mean(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	var s float64
	for _, x := range v {
		s += x
	}
	return s / float64(len(v))
}

// StdDev is the sample standard deviation (n − 1 in the denominator), as
// ISO 14644-1:1999 Annex C uses for the spread of location means; NaN for
// fewer than two values.
func StdDev(v []float64) float64 {
	if len(v) < 2 {
		return math.NaN()
	}
	m := Mean(v)
	var s float64
	for _, x := range v {
		d := x - m
		s += d * d
	}
	return math.Sqrt(s / float64(len(v)-1))
}

// StudentTQuantile returns t such that P(T ≤ t) = p for Student's t
// distribution with nu degrees of freedom. It inverts the distribution
// function (through the regularized incomplete beta function) by bisection
// to full float64 precision, so no table is involved.
func StudentTQuantile(p, nu float64) (float64, error) {
	if !(p > 0 && p < 1) || !(nu > 0) || math.IsInf(nu, 0) {
		return 0, fmt.Errorf("%w: t quantile needs 0 < p < 1 and nu > 0 (p=%v, nu=%v)", ErrStats, p, nu)
	}
	if p == 0.5 {
		return 0, nil
	}
	if p < 0.5 {
		t, err := StudentTQuantile(1-p, nu)
		return -t, err
	}
	lo, hi := 0.0, 1.0
	for StudentTCDF(hi, nu) < p {
		hi *= 2
		if hi > 1e300 {
			return math.Inf(1), nil
		}
	}
	for i := 0; i < 200 && hi-lo > 1e-15*hi; i++ {
		mid := (lo + hi) / 2
		if StudentTCDF(mid, nu) < p {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2, nil
}

// StudentTCDF is P(T ≤ t) for Student's t with nu degrees of freedom.
func StudentTCDF(t, nu float64) float64 {
	x := nu / (nu + t*t)
	tail := 0.5 * RegIncBeta(nu/2, 0.5, x)
	if t >= 0 {
		return 1 - tail
	}
	return tail
}

// RegIncBeta is the regularized incomplete beta function I_x(a, b),
// evaluated by its continued fraction (modified Lentz), using the symmetry
// I_x(a,b) = 1 − I_{1−x}(b,a) where the fraction converges slowly.
func RegIncBeta(a, b, x float64) float64 {
	switch {
	case x <= 0:
		return 0
	case x >= 1:
		return 1
	}
	lbeta := lgamma(a+b) - lgamma(a) - lgamma(b)
	front := math.Exp(lbeta + a*math.Log(x) + b*math.Log1p(-x))
	if x > (a+1)/(a+b+2) {
		return 1 - front*betaCF(b, a, 1-x)/b
	}
	return front * betaCF(a, b, x) / a
}

func lgamma(x float64) float64 {
	v, _ := math.Lgamma(x)
	return v
}

func betaCF(a, b, x float64) float64 {
	const tiny = 1e-300
	c, d := 1.0, 1-(a+b)*x/(a+1)
	if math.Abs(d) < tiny {
		d = tiny
	}
	d = 1 / d
	h := d
	for m := 1; m <= 10000; m++ {
		fm := float64(m)
		num := fm * (b - fm) * x / ((a + 2*fm - 1) * (a + 2*fm))
		d = 1 + num*d
		if math.Abs(d) < tiny {
			d = tiny
		}
		c = 1 + num/c
		if math.Abs(c) < tiny {
			c = tiny
		}
		d = 1 / d
		h *= d * c
		num = -(a + fm) * (a + b + fm) * x / ((a + 2*fm) * (a + 2*fm + 1))
		d = 1 + num*d
		if math.Abs(d) < tiny {
			d = tiny
		}
		c = 1 + num/c
		if math.Abs(c) < tiny {
			c = tiny
		}
		d = 1 / d
		del := d * c
		h *= del
		if math.Abs(del-1) < 1e-16 {
			break
		}
	}
	return h
}

// RegGammaP is the regularized lower incomplete gamma function P(a, x), by
// its series for x < a+1 and its continued fraction otherwise.
func RegGammaP(a, x float64) float64 {
	if x <= 0 {
		return 0
	}
	if x < a+1 {
		sum, term := 1/a, 1/a
		for n := 1; n < 100000; n++ {
			term *= x / (a + float64(n))
			sum += term
			if math.Abs(term) < math.Abs(sum)*1e-17 {
				break
			}
		}
		return sum * math.Exp(-x+a*math.Log(x)-lgamma(a))
	}
	const tiny = 1e-300
	b := x + 1 - a
	c := 1 / tiny
	d := 1 / b
	h := d
	for i := 1; i < 100000; i++ {
		an := -float64(i) * (float64(i) - a)
		b += 2
		d = an*d + b
		if math.Abs(d) < tiny {
			d = tiny
		}
		c = b + an/c
		if math.Abs(c) < tiny {
			c = tiny
		}
		d = 1 / d
		del := d * c
		h *= del
		if math.Abs(del-1) < 1e-16 {
			break
		}
	}
	return 1 - math.Exp(-x+a*math.Log(x)-lgamma(a))*h
}

// PoissonCDF is P(X ≤ k) for a Poisson count with mean lambda, which
// equals 1 − P(k+1, λ).
func PoissonCDF(k uint64, lambda float64) float64 {
	if lambda <= 0 {
		return 1
	}
	return 1 - RegGammaP(float64(k)+1, lambda)
}

// PoissonUpper returns the exact one-sided upper confidence bound on the
// mean of a Poisson count after observing k: the λ at which P(X ≤ k) =
// 1 − conf. It matters for low counts (≥5 µm, clean classes) where a mean
// of a few particles says little: 0 counts still allow a mean of about 3
// at 95 %.
func PoissonUpper(k uint64, conf float64) (float64, error) {
	if !(conf > 0 && conf < 1) {
		return 0, fmt.Errorf("%w: confidence %v must be inside (0, 1)", ErrStats, conf)
	}
	alpha := 1 - conf
	lo, hi := float64(k), float64(k)+10
	for PoissonCDF(k, hi) > alpha {
		hi *= 2
	}
	for i := 0; i < 300 && hi-lo > 1e-12*hi; i++ {
		mid := (lo + hi) / 2
		if PoissonCDF(k, mid) > alpha {
			lo = mid
		} else {
			hi = mid
		}
	}
	return (lo + hi) / 2, nil
}

// UCL95 is the 95 % upper confidence limit of the mean of location means
// that ISO 14644-1:1999 Annex C asks for 2 to 9 locations:
// UCL = M + t(0.95, m−1) × s/√m.
func UCL95(locationMeans []float64) (float64, error) {
	m := len(locationMeans)
	if m < 2 {
		return 0, fmt.Errorf("%w: UCL needs at least 2 location means, got %d", ErrStats, m)
	}
	t, err := StudentTQuantile(0.95, float64(m-1))
	if err != nil {
		return 0, err
	}
	return Mean(locationMeans) + t*StdDev(locationMeans)/math.Sqrt(float64(m)), nil
}

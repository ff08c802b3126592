package classify

import (
	"fmt"
	"math"
)

// Recovery is the result of an ISO 14644-3 recovery test: the recovery
// rate n (per minute) of the log-linear decay C = C0·e^(−n·t), the time for
// a 100:1 fall (ln 100 / n ≈ 4.6/n minutes), and the fit's R².
type Recovery struct {
	RatePerMin float64 `json:"rate_per_min"`
	T100Min    float64 `json:"t100_min"`
	C0PerM3    float64 `json:"c0_per_m3"`
	RSquared   float64 `json:"r_squared"`
	Points     int     `json:"points"`   // points the fit used
	FromMin    float64 `json:"from_min"` // time of the first point used
	ToMin      float64 `json:"to_min"`   // time of the last point used
}

// RecoveryRate fits ln C against time (minutes since the challenge ended)
// by least squares. Concentrations must be positive and at least two
// points are needed; a concentration that does not fall has no recovery
// rate.
func RecoveryRate(minutes, perM3 []float64) (Recovery, error) {
	if len(minutes) != len(perM3) || len(minutes) < 2 {
		return Recovery{}, fmt.Errorf("%w: recovery needs at least 2 paired points", ErrStats)
	}
	var sx, sy, sxx, sxy, syy float64
	for i := range minutes {
		if !(perM3[i] > 0) {
			return Recovery{}, fmt.Errorf("%w: point %d: concentration %v must be positive for a log-linear fit", ErrStats, i, perM3[i])
		}
		x, y := minutes[i], math.Log(perM3[i])
		sx += x
		sy += y
		sxx += x * x
		sxy += x * y
		syy += y * y
	}
	n := float64(len(minutes))
	den := n*sxx - sx*sx
	if den == 0 {
		return Recovery{}, fmt.Errorf("%w: all points at the same time", ErrStats)
	}
	slope := (n*sxy - sx*sy) / den
	icpt := (sy - slope*sx) / n
	if !(slope < 0) {
		return Recovery{}, fmt.Errorf("%w: concentration does not fall (slope %v)", ErrStats, slope)
	}
	var r2 float64
	if vy := n*syy - sy*sy; vy > 0 {
		r := (n*sxy - sx*sy) / math.Sqrt(den*vy)
		r2 = r * r
	} else {
		r2 = 1
	}
	rate := -slope
	return Recovery{RatePerMin: rate, T100Min: math.Log(100) / rate, C0PerM3: math.Exp(icpt), RSquared: r2,
		Points: len(minutes), FromMin: minutes[0], ToMin: minutes[len(minutes)-1]}, nil
}

// MinRecoveryPoints is the fewest points RecoveryFit accepts: with two the
// line always fits perfectly and R² says nothing.
const MinRecoveryPoints = 3

// RecoveryFit picks the decay out of a recorded series and fits it: from
// the highest concentration (the end of the challenge) forward, up to but
// not including the first point at or below floorPerM3 (the background or
// the target class limit, where the decay flattens and would bias the
// line; 0 for none) or at zero. Times must increase. The points used are
// reported.
func RecoveryFit(minutes, perM3 []float64, floorPerM3 float64) (Recovery, error) {
	if len(minutes) != len(perM3) {
		return Recovery{}, fmt.Errorf("%w: %d times for %d concentrations", ErrStats, len(minutes), len(perM3))
	}
	peak := -1
	for i := range minutes {
		if math.IsNaN(minutes[i]) || math.IsNaN(perM3[i]) || perM3[i] < 0 {
			return Recovery{}, fmt.Errorf("%w: point %d: time %v, concentration %v", ErrStats, i, minutes[i], perM3[i])
		}
		if i > 0 && !(minutes[i] > minutes[i-1]) {
			return Recovery{}, fmt.Errorf("%w: point %d: time %v does not follow %v", ErrStats, i, minutes[i], minutes[i-1])
		}
		if peak < 0 || perM3[i] > perM3[peak] {
			peak = i
		}
	}
	if peak < 0 {
		return Recovery{}, fmt.Errorf("%w: no points", ErrStats)
	}
	end := peak
	for end < len(perM3) && perM3[end] > floorPerM3 && perM3[end] > 0 {
		end++
	}
	if end-peak < MinRecoveryPoints {
		return Recovery{}, fmt.Errorf("%w: %d points between the peak %v /m³ at %v min and the floor %v /m³; the fit needs at least %d",
			ErrStats, end-peak, perM3[peak], minutes[peak], floorPerM3, MinRecoveryPoints)
	}
	return RecoveryRate(minutes[peak:end], perM3[peak:end])
}

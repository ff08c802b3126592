package classify

import (
	"errors"
	"fmt"
)

// ErrCounts reports a set of channel counts that cannot be real.
var ErrCounts = errors.New("classify: inconsistent counts")

// CumulativeFromDifferential turns per-channel counts (particles between a
// channel's threshold and the next larger one; the last channel open-ended)
// into cumulative counts (particles at or above each threshold). Channels
// must be in ascending size order.
func CumulativeFromDifferential(diff []uint64) []uint64 {
	out := make([]uint64, len(diff))
	var sum uint64
	for i := len(diff) - 1; i >= 0; i-- {
		sum += diff[i]
		out[i] = sum
	}
	return out
}

// DifferentialFromCumulative is the inverse of CumulativeFromDifferential.
// Cumulative counts may not increase with size: a larger threshold cannot
// see more particles than a smaller one, so that is reported as ErrCounts
// naming the channel index.
func DifferentialFromCumulative(cum []uint64) ([]uint64, error) {
	out := make([]uint64, len(cum))
	for i := range cum {
		if i+1 < len(cum) {
			if cum[i+1] > cum[i] {
				return nil, fmt.Errorf("%w: channel %d counts %d, more than the %d of the smaller channel before it", ErrCounts, i+1, cum[i+1], cum[i])
			}
			out[i] = cum[i] - cum[i+1]
		} else {
			out[i] = cum[i]
		}
	}
	return out, nil
}

// CheckCumulative reports the first channel whose cumulative count is
// larger than that of the smaller channel before it (index, true), or
// (-1, false) when the counts are consistent.
func CheckCumulative(cum []uint64) (int, bool) {
	for i := 1; i < len(cum); i++ {
		if cum[i] > cum[i-1] {
			return i, true
		}
	}
	return -1, false
}

// PerCubicMetre converts a count in a sampled volume (litres) to a
// concentration in particles/m³.
func PerCubicMetre(count uint64, volumeL float64) float64 {
	return float64(count) * 1000 / volumeL
}

package classify

import (
	"fmt"
	"math"
)

// Point is a sampling location's position in metres from one corner of
// the zone, x along its length and y along its width.
type Point struct {
	XM float64 `json:"x_m"`
	YM float64 `json:"y_m"`
}

// Layout places n sampling locations at the centres of n sections of equal
// area of a length × width rectangle (ISO 14644-1:2015 A.4.1, from memory:
// divide the area into sections of equal area, one location in each). The
// rectangle is cut into columns along its length; a column holding k
// sections is k/n of the length wide and each of its sections 1/k of the
// width high, so every section has area L·W/n. The number of columns
// keeps sections near square.
func Layout(lengthM, widthM float64, n int) ([]Point, error) {
	if !(lengthM > 0) || !(widthM > 0) || math.IsInf(lengthM, 0) || math.IsInf(widthM, 0) {
		return nil, fmt.Errorf("%w: length %v m and width %v m must be positive", ErrArea, lengthM, widthM)
	}
	if n < 1 {
		return nil, fmt.Errorf("%w: %d locations", ErrArea, n)
	}
	cols := int(math.Round(math.Sqrt(float64(n) * lengthM / widthM)))
	cols = max(1, min(cols, n))
	out := make([]Point, 0, n)
	x := 0.0
	for c := 0; c < cols; c++ {
		k := n / cols
		if c < n%cols {
			k++
		}
		w := lengthM * float64(k) / float64(n)
		for r := 0; r < k; r++ {
			h := widthM / float64(k)
			out = append(out, Point{XM: x + w/2, YM: h*float64(r) + h/2})
		}
		x += w
	}
	return out, nil
}

// PlanLayout is Layout with the minimum number of locations of the
// edition for the rectangle's area (Table A.1 for 2015, √A for 1999).
func PlanLayout(lengthM, widthM float64, ed Edition) ([]Point, error) {
	n, err := MinLocations(lengthM*widthM, ed)
	if err != nil {
		return nil, err
	}
	return Layout(lengthM, widthM, n)
}

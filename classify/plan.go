package classify

import (
	"errors"
	"fmt"
	"math"
)

// ErrArea reports an area for which no sampling plan can be made.
var ErrArea = errors.New("classify: invalid area")

// tableA1 is ISO 14644-1:2015 Table A.1: rows (area up to m², minimum
// locations). An area between two rows takes the next row up. Rows as
// recalled, from memory.
var tableA1 = []struct {
	area float64
	n    int
}{
	{2, 1}, {4, 2}, {6, 3}, {8, 4}, {10, 5}, {24, 6}, {28, 7}, {32, 8},
	{36, 9}, {52, 10}, {56, 11}, {64, 12}, {68, 13}, {72, 14}, {76, 15},
	{104, 16}, {108, 17}, {116, 18}, {148, 19}, {156, 20}, {192, 21},
	{232, 22}, {276, 23}, {352, 24}, {436, 25}, {636, 26}, {1000, 27},
}

// MinLocations returns the minimum number of sampling locations for a
// cleanroom or clean zone of the given area. The 2015 edition uses Table
// A.1 (95 % confidence that at least 90 % of the area is within the limit)
// and, above 1 000 m², N_L = 27 × A/1000 rounded up; the 1999 edition uses
// N_L = √A rounded up.
func MinLocations(areaM2 float64, ed Edition) (int, error) {
	if !(areaM2 > 0) || math.IsInf(areaM2, 0) {
		return 0, fmt.Errorf("%w: %v m² must be a positive number", ErrArea, areaM2)
	}
	switch ed {
	case Edition1999:
		return int(math.Ceil(math.Sqrt(areaM2) - 1e-12)), nil
	case Edition2015, "":
		for _, r := range tableA1 {
			if areaM2 <= r.area {
				return r.n, nil
			}
		}
		return int(math.Ceil(27*areaM2/1000 - 1e-9)), nil
	}
	return 0, fmt.Errorf("%w: %q", ErrEdition, ed)
}

// Floors of a single sample (ISO 14644-1, both editions): at least 2 litres
// and at least one minute of sampling.
const (
	MinSampleVolumeL = 2.0
	MinSampleMinutes = 1.0
)

// SampleVolumeL is the minimum single sample volume V_s = 20 / C_n,m × 1000
// litres, C_n,m being the class limit at the largest considered size, so
// that at least 20 particles would be counted at the limit; never less than
// 2 L.
func SampleVolumeL(limitAtLargestPerM3 float64) float64 {
	v := 20 / limitAtLargestPerM3 * 1000
	return math.Max(v, MinSampleVolumeL)
}

// SampleMinutes is the time to draw volumeL at flowLPM, never less than one
// minute.
func SampleMinutes(volumeL, flowLPM float64) float64 {
	return math.Max(volumeL/flowLPM, MinSampleMinutes)
}

// CeilTo rounds v up to the given number of decimals, for figures that are
// minimums (a sample volume rounded down would fall short of the rule).
func CeilTo(v float64, decimals int) float64 {
	p := math.Pow(10, float64(decimals))
	// Guard against 5.69000000001 being lifted to 5.70 by float noise.
	return math.Ceil(v*p-1e-9) / p
}

// Plan is a sampling plan for classifying one zone.
type Plan struct {
	Edition               Edition             `json:"edition"`
	Class                 *float64            `json:"class,omitempty"`
	Grade                 string              `json:"grade,omitempty"`
	State                 string              `json:"state,omitempty"`
	AreaM2                float64             `json:"area_m2"`
	Sizes                 []string            `json:"sizes_um"`
	Locations             int                 `json:"locations"`
	LargestSizeUM         float64             `json:"largest_size_um"`
	LimitAtLargestPerM3   float64             `json:"limit_at_largest_per_m3"`
	SampleVolumeL         float64             `json:"sample_volume_l"`
	FlowLPM               float64             `json:"flow_lpm"`
	SampleMinutes         float64             `json:"sample_minutes"`
	VolumeAtFlowL         float64             `json:"volume_at_flow_l"`
	MinVolumePerLocationL float64             `json:"min_volume_per_location_l,omitempty"`
	MinSamplesPerLocation int                 `json:"min_samples_per_location"`
	LimitsPerM3           map[string]*float64 `json:"limits_per_m3"`
	Notes                 []string            `json:"notes"`
	Sequential            *SequentialAdvice   `json:"sequential,omitempty"`
}

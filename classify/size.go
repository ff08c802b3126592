package classify

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Smallest and largest threshold sizes, in µm, that the ISO 14644-1 class
// formula covers.
const (
	MinSizeUM = 0.1
	MaxSizeUM = 5.0
)

// ErrSize reports a threshold size that cannot be used.
var ErrSize = errors.New("classify: size out of range")

// FormatSize writes a threshold size in µm as its shortest decimal ("0.3",
// "0.5", "1", "5"), the form used as a key in every JSON object and metric
// label, so that the same size is always spelt the same way.
func FormatSize(um float64) string {
	return strconv.FormatFloat(um, 'f', -1, 64)
}

// ParseSize reads a threshold size such as "0.5", "0.5um", "0.5µm" or
// "5 um" and checks that it lies inside 0.1–5 µm. The value is kept as
// given ("0.30" and "0.3" are the same number; "0.305" stays 0.305): a
// size silently rounded would judge a channel against another size's
// limit.
func ParseSize(s string) (float64, error) {
	t := strings.TrimSpace(s)
	for _, suf := range []string{"µm", "μm", "um", "UM", "Um"} {
		if strings.HasSuffix(t, suf) {
			t = strings.TrimSpace(strings.TrimSuffix(t, suf))
			break
		}
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%w: %q is not a size in µm", ErrSize, s)
	}
	if v < MinSizeUM || v > MaxSizeUM {
		return 0, fmt.Errorf("%w: %s µm is outside %s–%s µm, the range of the ISO 14644-1 class formula", ErrSize, FormatSize(v), FormatSize(MinSizeUM), FormatSize(MaxSizeUM))
	}
	return v, nil
}

// ParseSizes reads a comma-separated list of sizes ("0.3,0.5,5") and returns
// them ascending. Repeated sizes are an error: each size is one column.
func ParseSizes(list string) ([]float64, error) {
	parts := strings.Split(list, ",")
	out := make([]float64, 0, len(parts))
	seen := map[float64]bool{}
	for _, p := range parts {
		if strings.TrimSpace(p) == "" {
			continue
		}
		v, err := ParseSize(p)
		if err != nil {
			return nil, err
		}
		if seen[v] {
			return nil, fmt.Errorf("%w: %s µm listed twice", ErrSize, FormatSize(v))
		}
		seen[v] = true
		out = append(out, v)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("%w: no sizes given", ErrSize)
	}
	sortFloats(out)
	return out, nil
}

func sortFloats(v []float64) {
	for i := 1; i < len(v); i++ {
		for j := i; j > 0 && v[j] < v[j-1]; j-- {
			v[j], v[j-1] = v[j-1], v[j]
		}
	}
}

package classify

import (
	"errors"
	"fmt"
	"math"
)

// Edition names the edition of ISO 14644-1 whose rules apply.
type Edition string

// The supported editions. Edition2015 is the current one; Edition1999 is the
// legacy edition still named in older specifications and contracts.
const (
	Edition2015 Edition = "2015"
	Edition1999 Edition = "1999"
)

// ParseEdition reads "2015" or "1999"; an empty string means 2015.
func ParseEdition(s string) (Edition, error) {
	switch s {
	case "", "2015":
		return Edition2015, nil
	case "1999":
		return Edition1999, nil
	}
	return "", fmt.Errorf("%w: %q (want 2015 or 1999)", ErrEdition, s)
}

// Errors returned by the limit functions.
var (
	ErrClass   = errors.New("classify: invalid ISO class")
	ErrEdition = errors.New("classify: unknown edition")
)

// Limit is one cell of a limit table: a maximum concentration in
// particles/m³, or a cell the table leaves blank. A blank cell is not zero
// and not infinity: the standard gives no limit there, and Note says why so
// that the caller can refuse or warn.
type Limit struct {
	PerM3     float64 `json:"per_m3"`
	Specified bool    `json:"specified"`
	Note      string  `json:"note,omitempty"`
}

// Reasons a cell of ISO 14644-1 Table 1 is blank. The wording is ours; the
// grounds are the footnotes of the 2015 edition's Table 1.
const (
	noteLowConcentration  = "no limit: at this low concentration sampling and statistics do not support classification"
	noteLargeParticles    = "no limit: particles above 1 µm at this low concentration are lost in sampling lines, so classification at this size is not appropriate"
	noteMacroparticle     = "no limit: ≥5 µm at ISO 5 is specified only through the macroparticle (M) descriptor"
	noteHighConcentration = "no limit: concentrations are too high for particle counters at this size"
	noteLegacyBlank       = "no limit: the 1999 table gives no value for this cell"
)

// ValidateClass accepts ISO classes 1 to 9 in steps of 0.1 (intermediate
// classes are allowed by ISO 14644-1 in increments of 0.1 as the minimum).
func ValidateClass(n float64) error {
	if math.IsNaN(n) || n < 1 || n > 9 {
		return fmt.Errorf("%w: %v is outside 1–9", ErrClass, n)
	}
	if math.Abs(n*10-math.Round(n*10)) > 1e-9 {
		return fmt.Errorf("%w: %v is not in steps of 0.1", ErrClass, n)
	}
	return nil
}

// roundClass snaps a validated class to its 0.1 step so that float noise
// (4.499999…) cannot change a cell.
func roundClass(n float64) float64 { return math.Round(n*10) / 10 }

// FormulaConcentration is the ISO 14644-1 class formula
// Cn = 10^N × (0.1/D)^2.08 in particles/m³, unrounded.
func FormulaConcentration(class, sizeUM float64) float64 {
	return math.Pow(10, class) * math.Pow(0.1/sizeUM, 2.08)
}

// RoundLimit applies the tables' rounding: to no more than three
// significant figures, then to the nearest whole number (10 176 → 10 200,
// 23.65 → 24).
func RoundLimit(c float64) float64 {
	if c <= 0 {
		return 0
	}
	mag := math.Pow(10, math.Floor(math.Log10(c))-2)
	r := math.Round(c/mag) * mag
	return math.Round(r)
}

// ISOLimit returns the class limit at a threshold size for an edition: the
// formula with the tables' rounding, or a blank cell with its reason. The
// blank cells follow the pattern of the published Table 1 and extend it to
// intermediate classes:
//
//   - 2015: a rounded value below 10 /m³ is blank (too few particles);
//     sizes above 1 µm are blank below ISO 6 (ISO 5: macroparticle
//     descriptor only); sizes below 0.5 µm are blank above ISO 6 (too many
//     for counters).
//   - 1999: a rounded value below 2 /m³ is blank; sizes above 1 µm are
//     blank below ISO 5; sizes below 0.5 µm blank above ISO 6.
func ISOLimit(class, sizeUM float64, ed Edition) (Limit, error) {
	if err := ValidateClass(class); err != nil {
		return Limit{}, err
	}
	if math.IsNaN(sizeUM) || sizeUM < MinSizeUM || sizeUM > MaxSizeUM {
		return Limit{}, fmt.Errorf("%w: %v µm is outside %v–%v µm", ErrSize, sizeUM, MinSizeUM, MaxSizeUM)
	}
	n := roundClass(class)
	v := RoundLimit(FormulaConcentration(n, sizeUM))
	switch ed {
	case Edition2015, "":
		switch {
		case sizeUM < 0.5 && n > 6:
			return Limit{Note: noteHighConcentration}, nil
		case sizeUM > 1 && n < 6:
			if n == 5 {
				return Limit{Note: noteMacroparticle}, nil
			}
			return Limit{Note: noteLargeParticles}, nil
		case v < 10:
			return Limit{Note: noteLowConcentration}, nil
		}
	case Edition1999:
		switch {
		case sizeUM < 0.5 && n > 6, sizeUM > 1 && n < 5, v < 2:
			return Limit{Note: noteLegacyBlank}, nil
		}
	default:
		return Limit{}, fmt.Errorf("%w: %q", ErrEdition, ed)
	}
	return Limit{PerM3: v, Specified: true}, nil
}

// ClassNote returns a remark that applies to a whole class row, or "".
func ClassNote(class float64) string {
	if roundClass(class) == 9 {
		return "ISO 9 applies to the in-operation state only"
	}
	return ""
}

// FormatClass writes a class the way the tables do: "5", "4.5".
func FormatClass(n float64) string { return FormatSize(roundClass(n)) }

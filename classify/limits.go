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
// that the caller can refuse or warn. A specified limit may carry a Note
// too (NoteFormula) when no table shows it.
type Limit struct {
	PerM3     float64 `json:"per_m3"`
	Specified bool    `json:"specified"`
	Note      string  `json:"note,omitempty"`
}

// Reasons a cell of ISO 14644-1 Table 1 is blank. The wording is ours; the
// grounds are the footnotes of the 2015 edition's Table 1 (from memory).
const (
	noteLowConcentration  = "no limit: at this low concentration sampling and statistics do not support classification (ISO 14644-1:2015 Table 1, footnote)"
	noteLargeParticles    = "no limit: particles above 1 µm at this low concentration are lost in sampling lines, so classification at this size is not appropriate (ISO 14644-1:2015 Table 1, footnote)"
	noteMacroparticle     = "no limit: ≥5 µm at ISO 5 is specified only through the macroparticle (M) descriptor (ISO 14644-1:2015 Table 1, footnote; Annex C)"
	noteHighConcentration = "no limit: concentrations are too high for particle counters at this size (ISO 14644-1:2015 Table 1, footnote)"
	noteLegacyBlank       = "no limit: ISO 14644-1:1999 Table 1 gives no value for this cell"
)

// NoteFormula marks a limit that no published table shows (an intermediate
// class or a size between the tables' columns): it is the class formula
// with the tables' rounding, as the standard allows, and no blank is
// invented for it.
const NoteFormula = "by the class formula: ISO 14644-1 Table 1 shows no cell for this class and size"

// table1Sizes are the columns of ISO 14644-1 Table 1 (both editions), in µm.
var table1Sizes = []float64{0.1, 0.2, 0.3, 0.5, 1, 5}

// tableBlank2015 and tableBlank1999 list, per integer class, the columns
// (indexes into table1Sizes) that the published Table 1 leaves blank, with
// the reason. Cell by cell from ISO 14644-1:2015 Table 1 and 1999 Table 1
// (recalled, from memory); every other cell is the
// formula.
var tableBlank2015 = map[int]map[int]string{
	1: {1: noteLowConcentration, 2: noteLowConcentration, 3: noteLowConcentration, 4: noteLowConcentration, 5: noteLargeParticles},
	2: {3: noteLowConcentration, 4: noteLowConcentration, 5: noteLargeParticles},
	3: {4: noteLowConcentration, 5: noteLargeParticles},
	4: {5: noteLargeParticles},
	5: {5: noteMacroparticle},
	7: {0: noteHighConcentration, 1: noteHighConcentration, 2: noteHighConcentration},
	8: {0: noteHighConcentration, 1: noteHighConcentration, 2: noteHighConcentration},
	9: {0: noteHighConcentration, 1: noteHighConcentration, 2: noteHighConcentration},
}

var tableBlank1999 = map[int]map[int]string{
	1: {2: noteLegacyBlank, 3: noteLegacyBlank, 4: noteLegacyBlank, 5: noteLegacyBlank},
	2: {4: noteLegacyBlank, 5: noteLegacyBlank},
	3: {5: noteLegacyBlank},
	4: {5: noteLegacyBlank},
	7: {0: noteLegacyBlank, 1: noteLegacyBlank, 2: noteLegacyBlank},
	8: {0: noteLegacyBlank, 1: noteLegacyBlank, 2: noteLegacyBlank},
	9: {0: noteLegacyBlank, 1: noteLegacyBlank, 2: noteLegacyBlank},
}

// tableCell tells whether (class, size) is a cell of Table 1: an integer
// class at one of the table's sizes. It returns the column index.
func tableCell(class, sizeUM float64) (int, bool) {
	if class != math.Round(class) {
		return 0, false
	}
	for i, s := range table1Sizes {
		if s == sizeUM {
			return i, true
		}
	}
	return 0, false
}

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

// ISOLimit returns the class limit at a threshold size for an edition.
// A cell of the published Table 1 (integer class, one of the sizes 0.1,
// 0.2, 0.3, 0.5, 1, 5 µm) is the table's value or its blank with the
// table's reason. Any other class or size (intermediate classes in 0.1
// steps, sizes between the columns, ISO 14644-1:2015 Annex E, from memory)
// is the formula with the tables' rounding and Note NoteFormula: the tool
// does not extend the table's blanks by a rule of its own.
func ISOLimit(class, sizeUM float64, ed Edition) (Limit, error) {
	if err := ValidateClass(class); err != nil {
		return Limit{}, err
	}
	if math.IsNaN(sizeUM) || sizeUM < MinSizeUM || sizeUM > MaxSizeUM {
		return Limit{}, fmt.Errorf("%w: %v µm is outside %v–%v µm", ErrSize, sizeUM, MinSizeUM, MaxSizeUM)
	}
	n := roundClass(class)
	var blanks map[int]map[int]string
	switch ed {
	case Edition2015, "":
		blanks = tableBlank2015
	case Edition1999:
		blanks = tableBlank1999
	default:
		return Limit{}, fmt.Errorf("%w: %q", ErrEdition, ed)
	}
	v := RoundLimit(FormulaConcentration(n, sizeUM))
	col, inTable := tableCell(n, sizeUM)
	if !inTable {
		return Limit{PerM3: v, Specified: true, Note: NoteFormula}, nil
	}
	if note, blank := blanks[int(n)][col]; blank {
		return Limit{Note: note}, nil
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

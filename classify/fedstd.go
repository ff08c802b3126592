package classify

import (
	"fmt"
	"math"
)

// CubicFeetPerCubicMetre converts per-ft³ to per-m³ concentrations.
const CubicFeetPerCubicMetre = 35.3147

// fedNames are the English class names of the cancelled FED-STD-209E that
// are still spoken on the floor; each is the ≥0.5 µm count per ft³.
var fedNames = []float64{1, 10, 100, 1000, 10000, 100000}

// ISOFromFED returns the ISO 14644-1 class equivalent to an FED-STD-209E
// English class X (X particles/ft³ ≥0.5 µm), rounded to the 0.1 step: Class
// 100 → ISO 5. The equivalence is by the ≥0.5 µm concentration.
func ISOFromFED(x float64) (float64, error) {
	if !(x > 0) || math.IsInf(x, 0) {
		return 0, fmt.Errorf("classify: FED-STD-209E class %v must be a positive number", x)
	}
	perM3 := x * CubicFeetPerCubicMetre
	n := math.Log10(perM3 / math.Pow(0.1/0.5, 2.08))
	n = math.Round(n*10) / 10
	if err := ValidateClass(n); err != nil {
		return 0, fmt.Errorf("FED-STD-209E class %v has no ISO equivalent: %w", x, err)
	}
	return n, nil
}

// FEDFromISO returns the ≥0.5 µm concentration of an ISO class in
// particles/ft³ (ISO 5 → 99.7) and, when it is one of the six English class
// names, that name (100); name is 0 otherwise.
func FEDFromISO(class float64) (perFt3 float64, name float64, err error) {
	l, err := ISOLimit(class, 0.5, Edition1999)
	if err != nil {
		return 0, 0, err
	}
	perFt3 = RoundLimit(FormulaConcentration(roundClass(class), 0.5)) / CubicFeetPerCubicMetre
	if !l.Specified {
		return perFt3, 0, nil
	}
	for _, x := range fedNames {
		if math.Abs(perFt3-x)/x < 0.01 {
			return perFt3, x, nil
		}
	}
	return perFt3, 0, nil
}

// FEDLabel is the FED-STD-209E English class an ISO class matches by its
// ≥0.5 µm limit, written "Class 100", or "" when it matches none of the
// six. The standard was cancelled in 2001; the label is for reading old
// specifications only.
func FEDLabel(class float64) string {
	_, name, err := FEDFromISO(class)
	if err != nil || name == 0 {
		return ""
	}
	return "Class " + groupThousands(name)
}

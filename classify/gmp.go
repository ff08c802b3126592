package classify

import (
	"errors"
	"fmt"
)

// GMPUse selects which EU GMP Annex 1 (2022) table applies: the limits for
// classification (qualification) or those for routine monitoring. They
// differ only at ≥5 µm for grades A and B.
type GMPUse string

// The two uses of the grade limits.
const (
	GMPClassification GMPUse = "classification"
	GMPMonitoring     GMPUse = "monitoring"
)

// Operating states of a room (ISO 14644-1 and EU GMP Annex 1 terms).
const (
	AtRest      = "at-rest"
	InOperation = "in-operation"
)

// Errors for grade lookups.
var (
	ErrGrade = errors.New("classify: unknown GMP grade")
	ErrState = errors.New("classify: unknown operating state")
)

// GMPSizes are the two threshold sizes the grade tables use.
var GMPSizes = []float64{0.5, 5}

const (
	noteNotSpecified     = "not specified by EU GMP Annex 1 for this grade and state"
	noteNotPredetermined = "not predetermined by EU GMP Annex 1: the site sets limits from its risk assessment"
)

type gmpRow struct{ p05, p5 float64 } // 0 = not specified / not predetermined

// EU GMP Annex 1 (2022), Table 1 (classification) and the monitoring
// table, particles/m³ at ≥0.5 µm / ≥5 µm, from memory.
var gmpClassification = map[string]map[string]gmpRow{
	"A": {AtRest: {3520, 0}, InOperation: {3520, 0}},
	"B": {AtRest: {3520, 0}, InOperation: {352000, 2930}},
	"C": {AtRest: {352000, 2930}, InOperation: {3520000, 29300}},
	"D": {AtRest: {3520000, 29300}, InOperation: {0, 0}},
}

var gmpMonitoring = map[string]map[string]gmpRow{
	"A": {AtRest: {3520, 29}, InOperation: {3520, 29}},
	"B": {AtRest: {3520, 29}, InOperation: {352000, 2930}},
	"C": {AtRest: {352000, 2930}, InOperation: {3520000, 29300}},
	"D": {AtRest: {3520000, 29300}, InOperation: {0, 0}},
}

// ValidateGrade accepts the grades A–D.
func ValidateGrade(g string) error {
	if _, ok := gmpClassification[g]; !ok {
		return fmt.Errorf("%w: %q (want A, B, C or D)", ErrGrade, g)
	}
	return nil
}

// ValidateState accepts "at-rest" and "in-operation".
func ValidateState(s string) error {
	if s != AtRest && s != InOperation {
		return fmt.Errorf("%w: %q (want at-rest or in-operation)", ErrState, s)
	}
	return nil
}

// GMPLimit returns the grade limit at 0.5 or 5 µm. Cells that the Annex
// leaves open are returned unspecified with the Annex's reason: "not
// specified" for grades A and B at 5 µm in classification, "not
// predetermined" for grade D in operation.
func GMPLimit(grade, state string, use GMPUse, sizeUM float64) (Limit, error) {
	if err := ValidateGrade(grade); err != nil {
		return Limit{}, err
	}
	if err := ValidateState(state); err != nil {
		return Limit{}, err
	}
	table := gmpClassification
	switch use {
	case GMPClassification, "":
	case GMPMonitoring:
		table = gmpMonitoring
	default:
		return Limit{}, fmt.Errorf("classify: unknown GMP use %q (want classification or monitoring)", use)
	}
	row := table[grade][state]
	var v float64
	switch sizeUM {
	case 0.5:
		v = row.p05
	case 5:
		v = row.p5
	default:
		return Limit{}, fmt.Errorf("%w: EU GMP grades give limits at 0.5 and 5 µm only, not %s µm", ErrSize, FormatSize(sizeUM))
	}
	if v == 0 {
		if grade == "D" && state == InOperation {
			return Limit{Note: noteNotPredetermined}, nil
		}
		return Limit{Note: noteNotSpecified}, nil
	}
	return Limit{PerM3: v, Specified: true}, nil
}

// GradeAMinVolumeL is the air volume each location needs for grade A
// classification: at least 1 m³ (EU GMP Annex 1, from memory).
const GradeAMinVolumeL = 1000

package classify

import (
	"errors"
	"math"
	"strings"
	"testing"
)

var tableSizes = []float64{0.1, 0.2, 0.3, 0.5, 1, 5}

// blank marks a cell the published table leaves empty.
const blank = -1

// ISO 14644-1:2015 Table 1, particles/m³ (from memory).
var table2015 = map[int][6]float64{
	1: {10, blank, blank, blank, blank, blank},
	2: {100, 24, 10, blank, blank, blank},
	3: {1000, 237, 102, 35, blank, blank},
	4: {10000, 2370, 1020, 352, 83, blank},
	5: {100000, 23700, 10200, 3520, 832, blank},
	6: {1000000, 237000, 102000, 35200, 8320, 293},
	7: {blank, blank, blank, 352000, 83200, 2930},
	8: {blank, blank, blank, 3520000, 832000, 29300},
	9: {blank, blank, blank, 35200000, 8320000, 293000},
}

// ISO 14644-1:1999 Table 1: the 2015 table plus ISO 1 at 0.2 µm (2), ISO 2
// at 0.5 µm (4), ISO 3 at 1 µm (8) and ISO 5 at 5 µm (29) (from memory).
var table1999 = map[int][6]float64{
	1: {10, 2, blank, blank, blank, blank},
	2: {100, 24, 10, 4, blank, blank},
	3: {1000, 237, 102, 35, 8, blank},
	4: {10000, 2370, 1020, 352, 83, blank},
	5: {100000, 23700, 10200, 3520, 832, 29},
	6: {1000000, 237000, 102000, 35200, 8320, 293},
	7: {blank, blank, blank, 352000, 83200, 2930},
	8: {blank, blank, blank, 3520000, 832000, 29300},
	9: {blank, blank, blank, 35200000, 8320000, 293000},
}

func TestISOLimitEveryTableCell(t *testing.T) {
	for _, tc := range []struct {
		ed    Edition
		table map[int][6]float64
	}{{Edition2015, table2015}, {Edition1999, table1999}} {
		for class, row := range tc.table {
			for i, size := range tableSizes {
				got, err := ISOLimit(float64(class), size, tc.ed)
				if err != nil {
					t.Fatalf("%s ISO %d at %v µm: %v", tc.ed, class, size, err)
				}
				want := row[i]
				if want == blank {
					if got.Specified {
						t.Errorf("%s ISO %d at %v µm: got limit %v, the table leaves it blank", tc.ed, class, size, got.PerM3)
					}
					if got.Note == "" {
						t.Errorf("%s ISO %d at %v µm: blank cell without a reason", tc.ed, class, size)
					}
					continue
				}
				if !got.Specified || got.PerM3 != want {
					t.Errorf("%s ISO %d at %v µm: got %+v, table says %v", tc.ed, class, size, got, want)
				}
			}
		}
	}
}

func TestRoundLimit(t *testing.T) {
	// The rounding rule of ISO 14644-1 Table 1 (from memory):
	// nearest whole number, at most three significant figures.
	for _, tc := range []struct{ in, want float64 }{
		{10176, 10200}, {23651, 23700}, {23.65, 24}, {8.32, 8}, {352.3, 352}, {3516.9, 3520}, {2.37, 2},
	} {
		if got := RoundLimit(tc.in); got != tc.want {
			t.Errorf("RoundLimit(%v) = %v, want %v", tc.in, got, tc.want)
		}
	}
}

func TestIntermediateClass(t *testing.T) {
	// ISO 14644-1 formula Cn = 10^N (0.1/D)^2.08 at N = 4.5, D = 0.5:
	// 10^4.5 × 0.2^2.08 = 1112.2 → 1110 (three significant figures).
	got, err := ISOLimit(4.5, 0.5, Edition2015)
	if err != nil || got.PerM3 != 1110 {
		t.Fatalf("ISO 4.5 at 0.5 µm = %+v, %v; want 1110", got, err)
	}
}

func TestValidateClass(t *testing.T) {
	for _, ok := range []float64{1, 4.5, 5, 8.9, 9, 6.1} {
		if err := ValidateClass(ok); err != nil {
			t.Errorf("class %v refused: %v", ok, err)
		}
	}
	// Classes run 1 to 9 in steps of 0.1 (ISO 14644-1:2015 §3 and Table 1).
	for _, bad := range []float64{4.55, 0.5, 10, 0, -1, 9.01, math.NaN()} {
		if err := ValidateClass(bad); !errors.Is(err, ErrClass) {
			t.Errorf("class %v: got %v, want ErrClass", bad, err)
		}
	}
}

func TestISOLimitSizeRange(t *testing.T) {
	for _, s := range []float64{0.09, 5.1, 0, math.NaN()} {
		if _, err := ISOLimit(5, s, Edition2015); !errors.Is(err, ErrSize) {
			t.Errorf("size %v: got %v, want ErrSize", s, err)
		}
	}
}

func TestParseSize(t *testing.T) {
	for _, tc := range []struct {
		in   string
		want float64
	}{{"0.5", 0.5}, {"0.5um", 0.5}, {"0.30µm", 0.3}, {" 5 um", 5}, {"1", 1}} {
		got, err := ParseSize(tc.in)
		if err != nil || got != tc.want {
			t.Errorf("ParseSize(%q) = %v, %v; want %v", tc.in, got, err, tc.want)
		}
	}
	for _, bad := range []string{"", "abc", "0.05", "10um", "NaN", "Inf"} {
		if _, err := ParseSize(bad); !errors.Is(err, ErrSize) {
			t.Errorf("ParseSize(%q): got %v, want ErrSize", bad, err)
		}
	}
	if FormatSize(0.5) != "0.5" || FormatSize(5) != "5" || FormatSize(1) != "1" {
		t.Error("FormatSize must write the shortest decimal")
	}
	if _, err := ParseSizes("0.5,0.5"); err == nil {
		t.Error("a size listed twice must be refused")
	}
	got, err := ParseSizes("5,0.3,0.5")
	if err != nil || len(got) != 3 || got[0] != 0.3 || got[2] != 5 {
		t.Errorf("ParseSizes must sort: %v %v", got, err)
	}
}

// EU GMP Annex 1 (2022), Table 1 (classification) and the monitoring
// limits, from memory. 0 marks "not specified" or "not
// predetermined".
func TestGMPLimits(t *testing.T) {
	type row struct {
		grade, state string
		use          GMPUse
		p05, p5      float64
	}
	rows := []row{
		{"A", AtRest, GMPClassification, 3520, 0},
		{"A", InOperation, GMPClassification, 3520, 0},
		{"B", AtRest, GMPClassification, 3520, 0},
		{"B", InOperation, GMPClassification, 352000, 2930},
		{"C", AtRest, GMPClassification, 352000, 2930},
		{"C", InOperation, GMPClassification, 3520000, 29300},
		{"D", AtRest, GMPClassification, 3520000, 29300},
		{"D", InOperation, GMPClassification, 0, 0},
		{"A", AtRest, GMPMonitoring, 3520, 29},
		{"A", InOperation, GMPMonitoring, 3520, 29},
		{"B", AtRest, GMPMonitoring, 3520, 29},
		{"B", InOperation, GMPMonitoring, 352000, 2930},
		{"C", AtRest, GMPMonitoring, 352000, 2930},
		{"C", InOperation, GMPMonitoring, 3520000, 29300},
		{"D", AtRest, GMPMonitoring, 3520000, 29300},
		{"D", InOperation, GMPMonitoring, 0, 0},
	}
	for _, r := range rows {
		for _, c := range []struct{ size, want float64 }{{0.5, r.p05}, {5, r.p5}} {
			got, err := GMPLimit(r.grade, r.state, r.use, c.size)
			if err != nil {
				t.Fatalf("%+v: %v", r, err)
			}
			if c.want == 0 {
				if got.Specified || got.Note == "" {
					t.Errorf("grade %s %s %s at %v µm: got %+v, want an open cell with its reason", r.grade, r.state, r.use, c.size, got)
				}
				continue
			}
			if !got.Specified || got.PerM3 != c.want {
				t.Errorf("grade %s %s %s at %v µm: got %+v, want %v", r.grade, r.state, r.use, c.size, got, c.want)
			}
		}
	}
	d, _ := GMPLimit("D", InOperation, GMPClassification, 0.5)
	a, _ := GMPLimit("A", AtRest, GMPClassification, 5)
	if d.Note == a.Note {
		t.Error("'not predetermined' (D in operation) and 'not specified' (A at 5 µm) must stay distinct")
	}
	if _, err := GMPLimit("E", AtRest, GMPClassification, 0.5); !errors.Is(err, ErrGrade) {
		t.Errorf("grade E: %v", err)
	}
	if _, err := GMPLimit("A", "resting", GMPClassification, 0.5); !errors.Is(err, ErrState) {
		t.Errorf("bad state: %v", err)
	}
	if _, err := GMPLimit("A", AtRest, GMPClassification, 0.3); !errors.Is(err, ErrSize) {
		t.Errorf("0.3 µm for a grade: %v", err)
	}
}

func TestFEDEquivalence(t *testing.T) {
	// FED-STD-209E Class 100 ≈ ISO 5 and Class 100 000 ≈ ISO 8 (from
	// memory; 1 m³ = 35.3147 ft³); the full ladder 1→3 … 100 000→8.
	for _, tc := range []struct{ fed, iso float64 }{{1, 3}, {10, 4}, {100, 5}, {1000, 6}, {10000, 7}, {100000, 8}} {
		got, err := ISOFromFED(tc.fed)
		if err != nil || got != tc.iso {
			t.Errorf("ISOFromFED(%v) = %v, %v; want %v", tc.fed, got, err, tc.iso)
		}
		_, name, err := FEDFromISO(tc.iso)
		if err != nil || name != tc.fed {
			t.Errorf("FEDFromISO(%v) name = %v, %v; want %v", tc.iso, name, err, tc.fed)
		}
	}
	// ISO 5 at ≥0.5 µm: 3 520 /m³ ÷ 35.3147 = 99.7 /ft³.
	perFt3, _, _ := FEDFromISO(5)
	if math.Abs(perFt3-99.7) > 0.05 {
		t.Errorf("ISO 5 = %v /ft³, want 99.7", perFt3)
	}
	if _, err := ISOFromFED(0); err == nil {
		t.Error("class 0 must be refused")
	}
	if _, err := ISOFromFED(1e9); err == nil {
		t.Error("a class beyond ISO 9 must be refused")
	}
}

// Cells no table shows are the formula, not an invented blank: ISO
// 14644-1:2015 Annex E (from memory) allows intermediate classes and sizes
// inside 0.1–5 µm by Cn = 10^N × (0.1/D)^2.08, rounded as the tables are.
func TestISOLimitFormulaOutsideTable(t *testing.T) {
	for _, tc := range []struct {
		class, size float64
		want        float64 // worked by hand from the formula
	}{
		// 10^5 × (0.1/2.5)^2.08 = 10^5 × 0.0012368 = 123.68 → 124.
		{5, 2.5, 124},
		// 10^6.3 × (0.1/0.3)^2.08 = 1 995 262 × 0.10176 = 203 044 → 203 000.
		{6.3, 0.3, 203000},
		// 10^4 × (0.1/0.7)^2.08 = 10 000 × 0.017466 = 174.66 → 175.
		{4, 0.7, 175},
	} {
		got, err := ISOLimit(tc.class, tc.size, Edition2015)
		if err != nil || !got.Specified || got.PerM3 != tc.want || got.Note != NoteFormula {
			t.Errorf("ISO %v at %v µm = %+v, %v; want %v by the formula", tc.class, tc.size, got, err, tc.want)
		}
	}
	// The published blank stays blank, with the table's own reason.
	got, err := ISOLimit(5, 5, Edition2015)
	if err != nil || got.Specified || !strings.Contains(got.Note, "macroparticle") {
		t.Errorf("ISO 5 at 5 µm (2015 Table 1 blank, footnote to the M descriptor) = %+v, %v", got, err)
	}
	// ISO 14644-1:1999 Table 1 filled ISO 5 at 5 µm with 29.
	got, err = ISOLimit(5, 5, Edition1999)
	if err != nil || got.PerM3 != 29 {
		t.Errorf("1999 ISO 5 at 5 µm = %+v, %v; want 29", got, err)
	}
}

func TestParseSizeKeepsGivenValue(t *testing.T) {
	got, err := ParseSize("0.305um")
	if err != nil || got != 0.305 || FormatSize(got) != "0.305" {
		t.Errorf("ParseSize(0.305um) = %v, %v; a size must not be rounded", got, err)
	}
	_, err = ParseSize("0.099")
	if !errors.Is(err, ErrSize) || !strings.Contains(err.Error(), "0.1–5") {
		t.Errorf("0.099 µm: %v", err)
	}
}

package classify

import (
	"errors"
	"math"
	"testing"
)

func TestMinLocations2015TableA1(t *testing.T) {
	// ISO 14644-1:2015 Table A.1 (rows from memory; 52 →
	// 10 and the formula above 1 000 m² cross-checked against published
	// quotations). An area between rows takes the next row up.
	rows := [][2]float64{
		{2, 1}, {4, 2}, {6, 3}, {8, 4}, {10, 5}, {24, 6}, {28, 7}, {32, 8}, {36, 9}, {52, 10},
		{56, 11}, {64, 12}, {68, 13}, {72, 14}, {76, 15}, {104, 16}, {108, 17}, {116, 18},
		{148, 19}, {156, 20}, {192, 21}, {232, 22}, {276, 23}, {352, 24}, {436, 25}, {636, 26}, {1000, 27},
	}
	prev := 0.0
	for _, r := range rows {
		for _, a := range []float64{r[0], (prev + r[0]) / 2, prev + 0.01} {
			got, err := MinLocations(a, Edition2015)
			if err != nil || got != int(r[1]) {
				t.Errorf("%v m²: %d, %v; want %v", a, got, err, r[1])
			}
		}
		prev = r[0]
	}
	// Boundaries named in the issue: 24 → 6, 24.01 → 7, 1000 → 27, and
	// above 1 000 m² N = 27 × A/1000 rounded up: 1500 → 40.5 → 41.
	for _, tc := range []struct {
		a    float64
		want int
	}{{24, 6}, {24.01, 7}, {1000, 27}, {1000.01, 28}, {1500, 41}, {2000, 54}, {0.5, 1}} {
		if got, _ := MinLocations(tc.a, Edition2015); got != tc.want {
			t.Errorf("%v m²: %d, want %d", tc.a, got, tc.want)
		}
	}
}

func TestMinLocations1999(t *testing.T) {
	// ISO 14644-1:1999 B.4.1: N_L = √A rounded up.
	for _, tc := range []struct {
		a    float64
		want int
	}{{1, 1}, {4, 2}, {4.1, 3}, {60, 8}, {80, 9}, {100, 10}, {1500, 39}} {
		if got, _ := MinLocations(tc.a, Edition1999); got != tc.want {
			t.Errorf("%v m²: %d, want %d", tc.a, got, tc.want)
		}
	}
	for _, bad := range []float64{0, -3, math.NaN(), math.Inf(1)} {
		if _, err := MinLocations(bad, Edition2015); !errors.Is(err, ErrArea) {
			t.Errorf("area %v: %v", bad, err)
		}
	}
}

func TestMakePlan(t *testing.T) {
	// ISO 5, 80 m², 0.3 and 0.5 µm: 16 locations (Table A.1, 76 < 80 ≤
	// 104); V_s = 20/3520 × 1000 = 5.682 L → 5.69 rounded up; at 28.3 L/min
	// that is 0.2 min, so the one-minute floor rules.
	p, err := MakePlan(Target{Class: 5, AreaM2: 80, Sizes: []float64{0.3, 0.5}})
	if err != nil {
		t.Fatal(err)
	}
	if p.Locations != 16 || p.SampleVolumeL != 5.69 || p.SampleMinutes != 1 || p.Edition != "2015" {
		t.Errorf("plan %+v", p)
	}
	// ISO 8 at 5 µm: V_s = 20/29300 × 1000 = 0.68 L → the 2 L floor.
	p, _ = MakePlan(Target{Class: 8, AreaM2: 12, Sizes: []float64{0.5, 5}, State: InOperation})
	if p.SampleVolumeL != 2 {
		t.Errorf("2 L floor: %v", p.SampleVolumeL)
	}
	// ISO 4 at 1 µm: V_s = 20/83 × 1000 = 240.96 L; at 28.3 L/min 8.52 min.
	p, _ = MakePlan(Target{Class: 4, AreaM2: 10, Sizes: []float64{0.5, 1}})
	if p.SampleVolumeL != 240.97 || p.SampleMinutes != 8.52 {
		t.Errorf("ISO 4 at 1 µm: %v L, %v min", p.SampleVolumeL, p.SampleMinutes)
	}
	// Grade A: the 1 m³ per location of EU GMP Annex 1 (from memory).
	p, _ = MakePlan(Target{Grade: "A", AreaM2: 3})
	if p.MinVolumePerLocationL != 1000 || p.Locations != 2 {
		t.Errorf("grade A plan %+v", p)
	}
	// A blank cell is refused unless allowed.
	if _, err := MakePlan(Target{Class: 5, AreaM2: 3, Sizes: []float64{0.5, 5}}); !errors.Is(err, ErrBlankCell) {
		t.Errorf("ISO 5 at 5 µm: %v", err)
	}
	p, err = MakePlan(Target{Class: 5, AreaM2: 3, Sizes: []float64{0.5, 5}, AllowBlank: true})
	if err != nil || len(p.Notes) == 0 || p.LimitsPerM3["5"] != nil {
		t.Errorf("allowed blank cell: %+v %v", p, err)
	}
	if _, err := MakePlan(Target{Class: 9, AreaM2: 3, Sizes: []float64{0.5}}); !errors.Is(err, ErrTarget) {
		t.Errorf("ISO 9 at rest: %v", err)
	}
}

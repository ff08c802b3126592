package main

import (
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// Each rule of a certification as the command applies it: the verdict,
// the exit status and the reason, with the source of the rule beside it.
func TestCertifyRulesExit(t *testing.T) {
	dir := t.TempDir()
	instr := writeFile(t, dir, "instruments.csv", "counter,model,serial,calibration_due\npc-1,VP-2830,VPC-1,2026-03-01\n")
	for _, tc := range []struct {
		name, body string
		args       []string
		code       int
		verdict    string
		want       string // in problems or departures
	}{
		// ISO 14644-1:2015 Table A.1: 10 m² needs 5 locations; two sampled.
		{"too few locations", "location,volume_l,0.5um\nA,28.3,10\nB,28.3,10\n",
			[]string{"--class", "7", "--area", "10", "--sizes", "0.5"}, 1, "incomplete", "needs at least 5"},
		// ISO 14644-1:2015 A.4.2: at least one minute per sample; 5.69 L at
		// 28.3 L/min is 12 s (the ISO 5 sample volume at 0.5 µm).
		{"12-second samples", "location,volume_l,duration_s,0.5um\nA,5.69,12,1\nB,5.69,12,1\n",
			[]string{"--class", "5", "--area", "3", "--sizes", "0.5"}, 1, "incomplete", "minute"},
		{"12 seconds from volume and flow", "location,volume_l,0.5um\nA,5.69,1\nB,5.69,1\n",
			[]string{"--class", "5", "--area", "3", "--sizes", "0.5", "--flow", "28.3"}, 1, "incomplete", "minute"},
		// A calibration past due on the sampling date is a departure
		// (ISO 14644-1:2015 clause 5, from memory: calibration status).
		{"calibration past due", "location,time,counter,volume_l,0.5um\nA,2026-03-02T10:00:00Z,pc-1,28.3,10\nB,2026-03-02T10:05:00Z,pc-1,28.3,10\n",
			[]string{"--class", "7", "--area", "3", "--sizes", "0.5", "--instruments", instr}, 1, "incomplete", "past its calibration due date 2026-03-01"},
		{"calibration on its last day", "location,time,counter,volume_l,0.5um\nA,2026-03-01T23:59:00Z,pc-1,28.3,10\nB,2026-03-01T10:05:00Z,pc-1,28.3,10\n",
			[]string{"--class", "7", "--area", "3", "--sizes", "0.5", "--instruments", instr}, 0, "pass", ""},
		{"counter not listed", "location,time,counter,volume_l,0.5um\nA,2026-03-01T10:00:00Z,pc-9,28.3,10\nB,2026-03-01T10:05:00Z,pc-1,28.3,10\n",
			[]string{"--class", "7", "--area", "3", "--sizes", "0.5", "--instruments", instr}, 1, "incomplete", "pc-9"},
		// Sequential sampling, ISO 14644-1:2015 Annex D (from memory): ISO 4
		// at 1 µm, 83 /m³, E = 2.349 per 28.3 L; 9 particles in the first
		// sample are above the upper line 3.96 + 1.03 × 2.349 = 6.38.
		{"sequential fail", "location,time,volume_l,1um\nA,2026-03-01T10:00:00Z,28.3,9\nB,2026-03-01T10:05:00Z,28.3,0\nB,2026-03-01T10:06:00Z,28.3,0\n",
			[]string{"--class", "4", "--area", "3", "--sizes", "1", "--sequential"}, 1, "fail", "A"},
		// A measured exceedance is a failure even when the plan is not met.
		{"fail wins", "location,volume_l,0.5um\nA,28.3,20000\n",
			[]string{"--class", "7", "--area", "10", "--sizes", "0.5"}, 1, "fail", "exceeds"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := writeFile(t, dir, "s.csv", tc.body)
			code, out, errs := runCLI(t, append(append([]string{"certify", "--format", "json"}, tc.args...), p)...)
			if code != tc.code {
				t.Fatalf("exit %d, want %d; stderr %s\n%s", code, tc.code, errs, out)
			}
			var rep struct {
				Verdict    string   `json:"verdict"`
				Problems   []string `json:"problems"`
				Departures []string `json:"departures"`
			}
			if err := json.Unmarshal([]byte(out), &rep); err != nil {
				t.Fatal(err)
			}
			all := strings.Join(append(rep.Problems, rep.Departures...), "\n")
			if rep.Verdict != tc.verdict || !strings.Contains(all, tc.want) {
				t.Errorf("verdict %s, problems:\n%s\nwant %s and %q", rep.Verdict, all, tc.verdict, tc.want)
			}
		})
	}
}

func TestCertifyBadInstrumentsFile(t *testing.T) {
	dir := t.TempDir()
	instr := writeFile(t, dir, "instruments.csv", "counter,model,serial,calibration_due\npc-1,VP,VPC-1,31.12.2026\n")
	p := writeFile(t, dir, "s.csv", "location,volume_l,0.5um\nA,28.3,10\n")
	code, out, errs := runCLI(t, "certify", "--class", "7", "--area", "3", "--sizes", "0.5", "--instruments", instr, p)
	if code != 2 || out != "" || strings.Count(errs, "\n") != 1 || !strings.Contains(errs, "instruments.csv:2") || !strings.Contains(errs, "calibration_due") {
		t.Errorf("exit %d, stderr %q", code, errs)
	}
}

// The recovery of the example file, worked by hand: from the peak at
// 08:02 (352 000 /m³) the concentration halves every 2 minutes, so
// n = ln 2 / 2 = 0.346574 /min and the 100:1 time is ln 100 / n =
// 2 × ln 100 / ln 2 = 13.2877 min, with R² = 1. The ISO 5 limit at
// 0.5 µm, 3 520 /m³ (ISO 14644-1:2015 Table 1), stops the fit before
// 2 750 /m³: 7 points, 2 to 14 min.
func TestRecoveryWorkedDecay(t *testing.T) {
	code, out, errs := runCLI(t, "recovery", "--target-class", "5", "--format", "json", filepath.Join(repo, "testdata", "samples-recovery.csv"))
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var a struct {
		Rate   float64 `json:"rate_per_min"`
		T100   float64 `json:"t100_min"`
		R2     float64 `json:"r_squared"`
		Points int     `json:"points"`
		From   float64 `json:"from_min"`
		To     float64 `json:"to_min"`
		Floor  float64 `json:"floor_per_m3"`
		Series []struct {
			Used bool `json:"used"`
		} `json:"series"`
	}
	if err := json.Unmarshal([]byte(out), &a); err != nil {
		t.Fatal(err)
	}
	used := 0
	for _, p := range a.Series {
		if p.Used {
			used++
		}
	}
	if math.Abs(a.Rate-math.Ln2/2) > 1e-9 || math.Abs(a.T100-13.2877) > 1e-4 || math.Abs(a.R2-1) > 1e-12 ||
		a.Points != 7 || used != 7 || a.From != 2 || a.To != 14 || a.Floor != 3520 {
		t.Errorf("recovery %+v", a)
	}
}

// A noisy decay, checked against gonum's least-squares line of ln C on t.
func TestRecoveryAgainstGonum(t *testing.T) {
	noise := []float64{1.08, 0.93, 1.05, 0.97, 1.11, 0.9, 1.02, 0.95}
	var b strings.Builder
	b.WriteString("location,time,volume_l,0.5um\n")
	var xs, ys []float64
	for i, f := range noise {
		c := math.Round(400000 * math.Exp(-0.28*float64(i)) * f / 10) // per 100 L
		fmt.Fprintf(&b, "H,2026-03-04T09:%02d:00Z,100,%d\n", i, int(c))
		xs, ys = append(xs, float64(i)), append(ys, math.Log(c*10))
	}
	p := writeFile(t, t.TempDir(), "r.csv", b.String())
	code, out, errs := runCLI(t, "recovery", "--format", "json", p)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var a struct {
		Rate float64 `json:"rate_per_min"`
		R2   float64 `json:"r_squared"`
	}
	if err := json.Unmarshal([]byte(out), &a); err != nil {
		t.Fatal(err)
	}
	alpha, slope := stat.LinearRegression(xs, ys, nil, false)
	r2 := stat.RSquared(xs, ys, nil, alpha, slope)
	if math.Abs(a.Rate+slope) > 1e-9 || math.Abs(a.R2-r2) > 1e-9 {
		t.Errorf("rate %v R² %v, gonum %v %v", a.Rate, a.R2, -slope, r2)
	}
}

func TestRecoveryBadInput(t *testing.T) {
	dir := t.TempDir()
	for _, tc := range []struct {
		name, body string
		args       []string
		want       string
	}{
		{"two locations", "location,time,volume_l,0.5um\nA,2026-03-04T09:00:00Z,100,10\nB,2026-03-04T09:01:00Z,100,5\n", nil, "r.csv: classify: invalid samples: the samples hold 2 locations"},
		{"no time", "location,volume_l,0.5um\nA,100,10\nA,100,5\nA,100,2\n", nil, "line 2, field time"},
		{"no decay", "location,time,volume_l,0.5um\nA,2026-03-04T09:00:00Z,100,10\nA,2026-03-04T09:01:00Z,100,20\n", nil, "r.csv"},
		{"bad size", "location,time,volume_l,0.5um\nA,2026-03-04T09:00:00Z,100,10\n", []string{"--size", "9"}, "--size"},
		{"bad class", "location,time,volume_l,0.5um\nA,2026-03-04T09:00:00Z,100,10\n", []string{"--target-class", "12"}, "--target-class"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p := writeFile(t, dir, "r.csv", tc.body)
			code, out, errs := runCLI(t, append(append([]string{"recovery"}, tc.args...), p)...)
			if code != 2 || out != "" || strings.Count(errs, "\n") != 1 || !strings.Contains(errs, tc.want) {
				t.Errorf("exit %d stderr %q, want 2 naming %q", code, errs, tc.want)
			}
		})
	}
}

// ISO 14644-1:2015 A.4.1 (from memory): locations at the centres of
// equal sections; Table A.1: 10 m² needs 5 locations.
func TestPlanLayout(t *testing.T) {
	code, out, errs := runCLI(t, "plan", "--class", "4", "--length", "5", "--width", "2", "--sizes", "0.3,1", "--json")
	if code != 0 {
		t.Fatalf("exit %d %s", code, errs)
	}
	var p struct {
		Locations int     `json:"locations"`
		Area      float64 `json:"area_m2"`
		Layout    []struct {
			ID string  `json:"id"`
			XM float64 `json:"x_m"`
			YM float64 `json:"y_m"`
		} `json:"layout"`
		Sequential struct {
			Suggested bool    `json:"suggested"`
			Full      float64 `json:"full_minutes"`
		} `json:"sequential"`
	}
	if err := json.Unmarshal([]byte(out), &p); err != nil {
		t.Fatal(err)
	}
	if p.Locations != 5 || p.Area != 10 || len(p.Layout) != 5 {
		t.Fatalf("plan %+v", p)
	}
	// Worked by hand: 10 m² in 5 sections of 2 m²: a first column 2 m
	// wide holding two 2 m × 1 m sections, then three columns 1 m × 2 m.
	want := [][2]float64{{1, 0.5}, {1, 1.5}, {2.5, 1}, {3.5, 1}, {4.5, 1}}
	for i, l := range p.Layout {
		if l.XM != want[i][0] || l.YM != want[i][1] {
			t.Errorf("%s at (%v, %v), want %v", l.ID, l.XM, l.YM, want[i])
		}
		if l.XM <= 0 || l.XM >= 5 || l.YM <= 0 || l.YM >= 2 {
			t.Errorf("%s at (%v, %v) is outside the 5 m × 2 m zone", l.ID, l.XM, l.YM)
		}
	}
	// 20 / 83 × 1000 = 240.97 L at 28.3 L/min is 8.5 min: no need for
	// sequential sampling; ISO 3 at 0.5 µm (35 /m³): 571 L, 20.2 min, not
	// either; ISO 2 at 0.3 µm (10 /m³): 2 000 L, 70.7 min: suggested.
	if p.Sequential.Suggested || math.Abs(p.Sequential.Full-8.52) > 0.01 {
		t.Errorf("sequential advice %+v", p.Sequential)
	}
	_, out, _ = runCLI(t, "plan", "--class", "2", "--area", "4", "--sizes", "0.1,0.3")
	if !strings.Contains(out, "sequential sampling           suggested") {
		t.Errorf("ISO 2 plan does not suggest sequential sampling:\n%s", out)
	}
	if code, _, errs := runCLI(t, "plan", "--class", "4", "--length", "5", "--width", "2", "--area", "12", "--sizes", "1"); code != 2 || !strings.Contains(errs, "--area") {
		t.Errorf("inconsistent area: exit %d %q", code, errs)
	}
}

// FED-STD-209E (cancelled 2001): English Class X is X particles/ft³
// ≥0.5 µm; Class 1 ≈ ISO 3 … Class 100 000 ≈ ISO 8 (ISO 14644-1:1999
// Annex, from memory).
func TestLimitsFEDStd(t *testing.T) {
	_, out, _ := runCLI(t, "limits", "--fed-std", "--json")
	var tab struct {
		Classes []struct {
			ISO float64 `json:"iso_class"`
			FED string  `json:"fed_std_209e"`
		} `json:"classes"`
	}
	if err := json.Unmarshal([]byte(out), &tab); err != nil {
		t.Fatal(err)
	}
	want := map[float64]string{3: "Class 1", 4: "Class 10", 5: "Class 100", 6: "Class 1 000", 7: "Class 10 000", 8: "Class 100 000", 9: ""}
	got := map[float64]string{}
	for _, c := range tab.Classes {
		got[c.ISO] = c.FED
	}
	for iso, fed := range want {
		if got[iso] != fed {
			t.Errorf("ISO %v: %q, want %q", iso, got[iso], fed)
		}
	}
	_, out, _ = runCLI(t, "limits", "--class", "7", "--fed-std")
	if !strings.Contains(out, "FED-STD-209E: Class 10 000") {
		t.Errorf("limits --class 7 --fed-std:\n%s", out)
	}
	if code, _, errs := runCLI(t, "limits", "--grade", "A", "--state", "at-rest", "--fed-std"); code != 2 || !strings.Contains(errs, "--fed-std") {
		t.Errorf("grade with --fed-std: exit %d %q", code, errs)
	}
	if code, _, errs := runCLI(t, "limits", "--class", "5", "--macro", "M(a; b); c"); code != 2 || !strings.Contains(errs, "--macro") {
		t.Errorf("bad macro: exit %d %q", code, errs)
	}
}

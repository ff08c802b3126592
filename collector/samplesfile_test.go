package collector

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"cleanmon/classify"
)

func TestReadSamplesExample(t *testing.T) {
	f, err := os.Open(filepath.Join("..", "testdata", "samples-assembly.csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	s, err := ReadSamples(f, SampleFileOptions{Name: "assembly.csv", Sizes: []float64{0.5, 5}})
	if err != nil {
		t.Fatal(err)
	}
	if len(s) != 13 || s[0].Location != "A01" || s[0].Counts[0] != 2410 || s[0].Counts[1] != 21 || s[0].VolumeL != 28.3 || s[0].Time.IsZero() {
		t.Errorf("first sample %+v of %d", s[0], len(s))
	}
	if !strings.Contains(s[6].Ref, "line 12") {
		t.Errorf("ref %q should name the file line (comments count)", s[6].Ref)
	}
}

func TestReadSamplesDifferential(t *testing.T) {
	// Per channel 0.3–0.5: 70, 0.5–5: 25, ≥5: 5 → cumulative 100, 30, 5.
	s, err := ReadSamples(strings.NewReader("location,volume_l,0.3um,0.5um,5um\nL,28.3,70,25,5\n"),
		SampleFileOptions{Name: "d.csv", Sizes: []float64{0.3, 0.5, 5}, Differential: true})
	if err != nil {
		t.Fatal(err)
	}
	if c := s[0].Counts; c[0] != 100 || c[1] != 30 || c[2] != 5 {
		t.Errorf("cumulative %v", c)
	}
}

func TestReadSamplesErrorNamesPlace(t *testing.T) {
	_, err := ReadSamples(strings.NewReader("location,volume_l,0.5um\nL,28.3,1\nM,zero,1\n"), SampleFileOptions{Name: "x.csv", Sizes: []float64{0.5}})
	var fe *SampleFileError
	if !errors.As(err, &fe) || fe.File != "x.csv" || fe.Line != 3 || fe.Field != "volume_l" || !errors.Is(err, ErrSampleFile) {
		t.Fatalf("error %#v", err)
	}
}

// FuzzReadSamples checks the reader's contract on any input: it never
// panics, an error is always a *SampleFileError naming the file, and every
// accepted sample is one certify can use.
func FuzzReadSamples(f *testing.F) {
	f.Add([]byte("location,volume_l,0.5um,5um\nA,28.3,100,2\n"), false)
	f.Add([]byte("# comment\n\nlocation,sample,time,volume_l,0.5um,5um\nA,1,2026-03-02T10:00:00Z,28.3,100,2\n"), true)
	f.Add([]byte("\ufefflocation,volume_l,0.5µm,5 um\n\"A,1\",1e1,0,0\n"), false)
	sizes := []float64{0.5, 5}
	f.Fuzz(func(t *testing.T, data []byte, diff bool) {
		s, err := ReadSamples(strings.NewReader(string(data)), SampleFileOptions{Name: "f.csv", Sizes: sizes, Differential: diff})
		if err != nil {
			var fe *SampleFileError
			if !errors.As(err, &fe) || fe.File != "f.csv" {
				t.Fatalf("error %v is not a SampleFileError naming the file", err)
			}
			if s != nil {
				t.Fatal("samples returned with an error")
			}
			return
		}
		if len(s) == 0 {
			t.Fatal("success with no samples")
		}
		for _, x := range s {
			if x.Location == "" || !(x.VolumeL > 0) || len(x.Counts) != len(sizes) {
				t.Fatalf("unusable sample %+v", x)
			}
			if _, bad := classify.CheckCumulative(x.Counts); bad {
				t.Fatalf("counts %v increase with size", x.Counts)
			}
		}
	})
}

// A differential file with more channels than the considered sizes: the
// counts at or above a considered size are the sum of every channel from
// it upward, the unconsidered 1 µm channel included (definition of
// cumulative counts, common practice, no source). Per channel 0.3–0.5:
// 100, 0.5–1: 2 000, 1–5: 400, ≥5: 30 → ≥0.5 µm 2 430, ≥5 µm 30.
// Dropping the 1 µm column would have given 2 030 at 0.5 µm.
func TestReadSamplesDifferentialExtraChannels(t *testing.T) {
	s, err := ReadSamples(strings.NewReader("location,volume_l,5um,0.3um,1um,0.5um\nL,28.3,30,100,400,2000\n"),
		SampleFileOptions{Name: "d.csv", Sizes: []float64{0.5, 5}, Differential: true})
	if err != nil {
		t.Fatal(err)
	}
	if c := s[0].Counts; len(c) != 2 || c[0] != 2430 || c[1] != 30 {
		t.Errorf("cumulative %v, want [2430 30]", c)
	}
}

func TestReadSamplesCumulativeExtraChannels(t *testing.T) {
	s, err := ReadSamples(strings.NewReader("location,volume_l,0.3um,0.5um,1um,5um\nL,28.3,9000,2430,430,30\n"),
		SampleFileOptions{Name: "c.csv", Sizes: []float64{0.5, 5}})
	if err != nil {
		t.Fatal(err)
	}
	if c := s[0].Counts; len(c) != 2 || c[0] != 2430 || c[1] != 30 {
		t.Errorf("counts %v, want [2430 30]", c)
	}
	// An unconsidered channel is still checked: 1 µm above 0.5 µm.
	_, err = ReadSamples(strings.NewReader("location,volume_l,0.5um,1um,5um\nL,28.3,100,200,3\n"),
		SampleFileOptions{Name: "c.csv", Sizes: []float64{0.5, 5}})
	var fe *SampleFileError
	if !errors.As(err, &fe) || fe.Line != 2 || fe.Field != "1um" {
		t.Errorf("inconsistent extra channel: %v", err)
	}
}

func TestReadSamplesOptionalColumns(t *testing.T) {
	in := "location,sample,counter,time,duration_s,volume_l,x_m,y_m,0.5um\nA1,3,pc-1,2026-03-02T09:00:00Z,60,28.3,1.5,2,12\nA2,4,pc-1,,,28.3,,,7\n"
	s, err := ReadSamples(strings.NewReader(in), SampleFileOptions{Name: "o.csv", Sizes: []float64{0.5}})
	if err != nil {
		t.Fatal(err)
	}
	a := s[0]
	if a.SampleID != "3" || a.Counter != "pc-1" || a.DurationS != 60 || a.XM == nil || *a.XM != 1.5 || *a.YM != 2 || a.Time.IsZero() {
		t.Errorf("sample %+v", a)
	}
	if b := s[1]; b.DurationS != 0 || b.XM != nil || !b.Time.IsZero() {
		t.Errorf("sample with empty optional cells %+v", b)
	}
}

func TestReadSamplesHeaderErrors(t *testing.T) {
	for _, tc := range []struct{ in, field, msg string }{
		{"location,volume_l,0.3um\nA,1,1\n", "0.5um", "missing (the file has 0.3)"},
		{"location,volume_l,0.5um,10um\nA,1,1,1\n", "10um", "0.1–5"},
		{"location,volume_l,0.5um,0.50um\nA,1,1,1\n", "0.50um", "twice"},
		{"location,volume_l,0.5um,x_m\nA,1,1,1\n", "x_m", "both"},
		{"location,volume_l,0.5um,duration_s\nA,28.3,1,-5\n", "duration_s", "positive"},
		{"location,volume_l,0.5um,x_m,y_m\nA,28.3,1,1,-2\n", "y_m", "negative"},
	} {
		_, err := ReadSamples(strings.NewReader(tc.in), SampleFileOptions{Name: "h.csv", Sizes: []float64{0.5}})
		var fe *SampleFileError
		if !errors.As(err, &fe) || fe.Field != tc.field || !strings.Contains(err.Error(), tc.msg) {
			t.Errorf("%q: %v; want field %s and %q", tc.in, err, tc.field, tc.msg)
		}
	}
}

// End to end: an ISO 7 zone of 2 m² (one location, ISO 14644-1:2015 Table
// A.1) judged at 0.5 and 5 µm (352 000 and 2 930 /m³, Table 1) from a
// differential file that also has 0.3 and 1 µm channels. Per channel
// 0.5–1: 6 000, 1–5: 5 000, ≥5: 50 in 28.3 L → ≥0.5 µm 11 050 →
// 390 459 /m³, above the limit: fail. Had the 1 µm channel been dropped,
// ≥0.5 µm would read 6 050 → 213 781 /m³ and pass.
func TestDifferentialExtraChannelsCertify(t *testing.T) {
	in := "location,volume_l,0.3um,0.5um,1um,5um\nA,28.3,5000,6000,5000,50\n"
	s, err := ReadSamples(strings.NewReader(in), SampleFileOptions{Name: "d.csv", Sizes: []float64{0.5, 5}, Differential: true})
	if err != nil {
		t.Fatal(err)
	}
	r, err := classify.Certify(classify.Target{Class: 7, AreaM2: 2, Sizes: []float64{0.5, 5}, State: classify.InOperation}, s)
	if err != nil {
		t.Fatal(err)
	}
	if m := r.Locations[0].MeanPerM3["0.5"]; r.Verdict != classify.Fail || m < 390459 || m > 390460 {
		t.Errorf("verdict %s, mean %v /m³ at 0.5 µm; want fail at 390 459", r.Verdict, m)
	}
}

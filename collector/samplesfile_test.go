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

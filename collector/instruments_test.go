package collector

import (
	"errors"
	"strings"
	"testing"
	"time"
)

func TestReadInstruments(t *testing.T) {
	in := "# counters used at Veldmark Photonics, building C\ncounter,model,serial,calibration_due\npc-asm-1,LPC-28,SN 1001,2026-09-30\n\npc-asm-2,LPC-28,SN 1002,2026-02-28\n"
	got, err := ReadInstruments(strings.NewReader(in), "i.csv")
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 2 || got[0].ID != "pc-asm-1" || got[0].Model != "LPC-28" || got[0].Serial != "SN 1001" ||
		!got[1].CalibrationDue.Equal(time.Date(2026, 2, 28, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("instruments %+v", got)
	}
	// The due date is the last valid day.
	if !got[1].CalibrationValidOn(time.Date(2026, 2, 28, 23, 59, 0, 0, time.UTC)) || got[1].CalibrationValidOn(time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)) {
		t.Error("calibration validity around the due date")
	}
}

func TestReadInstrumentsErrors(t *testing.T) {
	for _, tc := range []struct {
		in, field string
		line      int
	}{
		{"counter,serial\npc-1,1\n", "calibration_due", 1},
		{"counter,serial,calibration_due,colour\npc-1,1,2026-01-01,red\n", "colour", 1},
		{"counter,serial,calibration_due\npc-1,1,2026-01-01\nPC-1,2,2026-01-01\n", "counter", 3},
		{"counter,serial,calibration_due\npc-1,1,31/12/2026\n", "calibration_due", 2},
		{"counter,serial,calibration_due\npc-1,,2026-01-01\n", "serial", 2},
		{"counter,serial,calibration_due\n", "", 1},
	} {
		got, err := ReadInstruments(strings.NewReader(tc.in), "i.csv")
		var fe *SampleFileError
		if !errors.As(err, &fe) || fe.File != "i.csv" || fe.Field != tc.field || fe.Line != tc.line || got != nil {
			t.Errorf("%q: %v; want line %d field %q", tc.in, err, tc.line, tc.field)
		}
	}
}

// FuzzReadInstruments checks the reader's contract on any input: no
// panic, errors name the file and return nothing, accepted rows are whole.
func FuzzReadInstruments(f *testing.F) {
	f.Add([]byte("counter,model,serial,calibration_due\npc-1,M,S1,2026-09-30\n"))
	f.Add([]byte("\ufeffcounter,serial,calibration_due\n# x\n\"pc,1\",S,2026-01-01\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		got, err := ReadInstruments(strings.NewReader(string(data)), "f.csv")
		if err != nil {
			var fe *SampleFileError
			if !errors.As(err, &fe) || fe.File != "f.csv" || got != nil {
				t.Fatalf("error %v (%T) with %d instruments", err, err, len(got))
			}
			return
		}
		if len(got) == 0 {
			t.Fatal("success with no instruments")
		}
		for _, in := range got {
			if in.ID == "" || in.Serial == "" || in.CalibrationDue.IsZero() {
				t.Fatalf("incomplete instrument %+v", in)
			}
		}
	})
}

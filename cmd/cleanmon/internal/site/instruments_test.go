package site

import (
	"strings"
	"testing"
	"time"
)

func TestCounterInstruments(t *testing.T) {
	cfg, err := Load("site.yaml", []byte(editLine(10, `  - {id: pc-h, zone: hood, location: h-1, sizes: ["0.3", "0.5", "1", "5"], model: VP-2830, serial: VPC-1, calibration_due: 2026-09-30}`)))
	if err != nil {
		t.Fatal(err)
	}
	in := cfg.Instruments("hood")
	if len(in) != 1 || in[0].ID != "pc-h" || in[0].Serial != "VPC-1" || in[0].Model != "VP-2830" ||
		!in[0].CalibrationDue.Equal(time.Date(2026, 9, 30, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("instruments %+v", in)
	}
	// Without a due date the zone has no instruments list: the report says
	// the calibration status is unknown.
	cfg, err = Load("site.yaml", []byte(baseSite))
	if err != nil {
		t.Fatal(err)
	}
	if in := cfg.Instruments("hood"); in != nil {
		t.Errorf("instruments %+v without a due date", in)
	}
}

func TestCounterInstrumentProblems(t *testing.T) {
	for _, tc := range []struct{ line, want string }{
		{`  - {id: pc-h, zone: hood, location: h-1, sizes: ["0.3", "0.5", "1", "5"], calibration_due: 30.09.2026}`, "site.yaml:10:93: counters[0].calibration_due: \"30.09.2026\" is not a date"},
		{`  - {id: pc-h, zone: hood, location: h-1, sizes: ["0.3", "0.5", "1", "5"], serial: "a\tb"}`, "site.yaml:10:84: counters[0].serial"},
		{`  - {id: pc-h, zone: hood, location: h-1, sizes: ["0.3", "0.5", "1", "5"], calibration: 2026-09-30}`, "calibration"},
	} {
		_, err := Load("site.yaml", []byte(editLine(10, tc.line)))
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: %v, want %q", tc.line, err, tc.want)
		}
	}
}

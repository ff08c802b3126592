package investigate

import (
	"errors"
	"strings"
	"testing"
	"time"
)

func TestReadRunsCSV(t *testing.T) {
	src := `# runs of the assembly room, exported by the execution system
id,zone,start,end,product,lot

SF-0312,assembly,2026-03-02T06:00:00Z,2026-03-02T14:00:00Z,lens L-40,L40-112
SF-0313, assembly ,2026-03-02T14:00:00+01:00,,"lens L-40, coated",L40-113
`
	runs, err := ReadRunsCSV(strings.NewReader(src), "runs.csv")
	if err != nil {
		t.Fatal(err)
	}
	want := []Run{
		{ID: "SF-0312", Zone: "assembly", Start: time.Date(2026, 3, 2, 6, 0, 0, 0, time.UTC), End: time.Date(2026, 3, 2, 14, 0, 0, 0, time.UTC), Product: "lens L-40", Lot: "L40-112"},
		{ID: "SF-0313", Zone: "assembly", Start: time.Date(2026, 3, 2, 13, 0, 0, 0, time.UTC), Product: "lens L-40, coated", Lot: "L40-113"},
	}
	if len(runs) != len(want) {
		t.Fatalf("%d runs, want %d", len(runs), len(want))
	}
	for i := range want {
		g := runs[i]
		if g.ID != want[i].ID || g.Zone != want[i].Zone || !g.Start.Equal(want[i].Start) || !g.End.Equal(want[i].End) || g.Product != want[i].Product || g.Lot != want[i].Lot {
			t.Errorf("run %d = %+v, want %+v", i, g, want[i])
		}
	}
	// Only the required columns, in another order.
	runs, err = ReadRunsCSV(strings.NewReader("start,zone,id\n2026-03-02T06:00:00Z,gowning,G-1\n"), "min.csv")
	if err != nil || len(runs) != 1 || runs[0].ID != "G-1" || !runs[0].End.IsZero() {
		t.Errorf("minimal file: %+v, %v", runs, err)
	}
}

func TestReadRunsCSVErrors(t *testing.T) {
	const head = "id,zone,start,end,product,lot\n"
	const ok = "R-1,assembly,2026-03-02T06:00:00Z,,p,l\n"
	tests := []struct {
		name, src string
		line      int
		field     string
	}{
		{"empty file", "", 1, ""},
		{"unknown column", "id,zone,start,batch\n", 1, "batch"},
		{"column twice", "id,zone,start,zone\n", 1, "zone"},
		{"missing start column", "id,zone\n", 1, "start"},
		{"empty id", head + ok + ",assembly,2026-03-02T06:00:00Z,,,\n", 3, "id"},
		{"empty zone", head + "R-1,,2026-03-02T06:00:00Z,,,\n", 2, "zone"},
		{"bad start", head + "R-1,assembly,02/03/2026 06:00,,,\n", 2, "start"},
		{"bad end", head + "R-1,assembly,2026-03-02T06:00:00Z,tomorrow,,\n", 2, "end"},
		{"end before start", head + "R-1,assembly,2026-03-02T06:00:00Z,2026-03-02T05:00:00Z,,\n", 2, "end"},
		{"end at start", head + "R-1,assembly,2026-03-02T06:00:00Z,2026-03-02T06:00:00Z,,\n", 2, "end"},
		{"duplicate id after a comment", head + ok + "# note\n" + ok, 4, "id"},
		{"short line", head + "R-1,assembly\n", 2, ""},
		{"open quote", head + "R-1,\"assembly,2026-03-02T06:00:00Z,,,\n", 2, ""},
	}
	for _, tc := range tests {
		runs, err := ReadRunsCSV(strings.NewReader(tc.src), "runs.csv")
		var ce *CSVError
		if !errors.As(err, &ce) || !errors.Is(err, ErrInput) || ce.File != "runs.csv" || ce.Line != tc.line || ce.Field != tc.field || runs != nil {
			t.Errorf("%s: %v (%+v), want runs.csv line %d field %q and no runs", tc.name, err, ce, tc.line, tc.field)
		}
	}
}

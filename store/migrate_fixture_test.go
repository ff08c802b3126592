package store

import (
	"context"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"testing"
	"time"
)

// genV1 rewrites testdata/v1/cleanmon.db, the store a schema-1 program
// wrote. Run it only with the schema-1 code (the commit that added it):
//
//	go test ./store -run TestGenerateV1Fixture -gen-v1
var genV1 = flag.Bool("gen-v1", false, "rewrite testdata/v1/cleanmon.db with this program's format")

// v1FixtureDir holds a store in the layout of schema 1: one bbolt value per
// reading and per pressure sample, rollups at 1 min and 1 h.
const v1FixtureDir = "testdata/v1"

// v1Readings is the content of the schema-1 fixture, rebuilt by the tests
// that read it: three cumulative counters sampling once a minute, one
// differential counter with sizes that are not whole nanometres and an
// irregular period, in two batches each.
func v1Readings() []Reading {
	start := time.Date(2025, 11, 30, 22, 0, 0, 0, time.UTC)
	var out []Reading
	for c, name := range []string{"pc-asm-1", "pc-asm-2", "pc-hood"} {
		for i := range 300 {
			r := reading(name, start.Add(time.Duration(i)*time.Minute), uint64(90+(i*7+c*13)%41))
			if i%50 == 7 {
				r.Status = "warning"
			}
			out = append(out, r)
		}
	}
	for i := range 120 {
		t := start.Add(time.Duration(i*97+i%3) * time.Second).Add(time.Duration(i%5) * time.Millisecond)
		out = append(out, Reading{
			Counter: "pc-met", Time: t, VolumeL: 2.83, Differential: true,
			Sizes:  []float64{0.3, 0.5, 1.0000001},
			Counts: []uint64{uint64(i * 3 % 17), uint64(i % 4), uint64(i % 2)},
		})
	}
	return out
}

func v1Pressure() []Pressure {
	start := time.Date(2025, 11, 30, 22, 0, 0, 0, time.UTC)
	var out []Pressure
	for i := range 200 {
		out = append(out, Pressure{Sensor: "dp-asm", Time: start.Add(time.Duration(i) * 10 * time.Second), Pa: 12.5 + float64(i%9)/10})
	}
	return out
}

func TestGenerateV1Fixture(t *testing.T) {
	if !*genV1 {
		t.Skip("run with -gen-v1 to rewrite the schema-1 fixture")
	}
	if schemaVersion != 1 {
		t.Fatalf("this program writes schema %d; the fixture must come from schema 1", schemaVersion)
	}
	dir := t.TempDir()
	s, err := Open(dir, Options{})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	rs := v1Readings()
	for _, half := range [][]Reading{rs[:len(rs)/2], rs[len(rs)/2:]} {
		if _, _, err := s.AppendReadings(ctx, half); err != nil {
			t.Fatal(err)
		}
	}
	if _, _, err := s.AppendPressure(ctx, v1Pressure()); err != nil {
		t.Fatal(err)
	}
	if err := s.SetOperatingState(ctx, OperatingState{Zone: "assembly", State: "in-operation", By: "fixture", Reason: "shift start", Time: time.Date(2025, 11, 30, 22, 0, 0, 0, time.UTC)}); err != nil {
		t.Fatal(err)
	}
	// A consistent copy holds only the pages in use; the file itself
	// carries bbolt's 16 MB growth allowance.
	if err := os.MkdirAll(v1FixtureDir, 0o755); err != nil {
		t.Fatal(err)
	}
	if _, err := s.BackupFile(filepath.Join(v1FixtureDir, FileName)); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if p, err := Verify(v1FixtureDir); err != nil || len(p) > 0 {
		t.Fatalf("fresh fixture does not verify: %v %v", p, err)
	}
	raw, err := os.ReadFile(filepath.Join(v1FixtureDir, FileName))
	if err != nil {
		t.Fatal(err)
	}
	fmt.Printf("wrote %s (%d bytes)\n", filepath.Join(v1FixtureDir, FileName), len(raw))
}

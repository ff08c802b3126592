package store

import (
	"context"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"testing"
	"time"
)

// genV2 rewrites testdata/v2/cleanmon.db, the store a schema-2 program
// wrote: readings in chunks and in the legacy head (one value per
// reading), pressure chunks, environment samples one value each, and the
// audit chain over all of it. Run it only with the schema-2 code (the
// commit before the head log):
//
//	go test ./store -run TestGenerateV2Fixture -gen-v2
var genV2 = flag.Bool("gen-v2", false, "rewrite testdata/v2/cleanmon.db with this program's format")

const v2FixtureDir = "testdata/v2"

// v2Env is the environment content of the schema-2 fixture.
func v2Env() []EnvSample {
	start := time.Date(2026, 6, 1, 8, 0, 0, 0, time.UTC)
	var out []EnvSample
	for i := range 90 {
		out = append(out, EnvSample{Sensor: "th-asm", Time: start.Add(time.Duration(i) * time.Minute), Has: EnvTemperature | EnvHumidity,
			TemperatureC: 21 + float64(i%7)/10, HumidityPct: 45 + float64(i%5)/10})
	}
	return out
}

func TestGenerateV2Fixture(t *testing.T) {
	if !*genV2 {
		t.Skip("run with -gen-v2 to rewrite the schema-2 fixture")
	}
	if schemaVersion != 2 {
		t.Fatalf("this program writes schema %d; the fixture must come from schema 2", schemaVersion)
	}
	s, err := Open(t.TempDir(), Options{keepHead: true, CompactEvery: -1})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	rs := v1Readings()
	if _, _, err := s.AppendReadings(ctx, rs[:len(rs)/2]); err != nil {
		t.Fatal(err)
	}
	if _, _, err := s.AppendPressure(ctx, v1Pressure()); err != nil {
		t.Fatal(err)
	}
	if _, err := s.Compact(ctx); err != nil {
		t.Fatal(err)
	}
	if _, _, err := s.AppendReadings(ctx, rs[len(rs)/2:]); err != nil {
		t.Fatal(err)
	}
	if _, _, err := s.AppendEnvironment(ctx, v2Env()); err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(v2FixtureDir, 0o755); err != nil {
		t.Fatal(err)
	}
	if _, err := s.BackupFile(filepath.Join(v2FixtureDir, FileName)); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if p, err := Verify(v2FixtureDir); err != nil || len(p) > 0 {
		t.Fatalf("fresh fixture does not verify: %v %v", p, err)
	}
	raw, err := os.ReadFile(filepath.Join(v2FixtureDir, FileName))
	if err != nil {
		t.Fatal(err)
	}
	fmt.Printf("wrote %s (%d bytes)\n", filepath.Join(v2FixtureDir, FileName), len(raw))
}

// TestSchema2StoreOpens: a store the previous version wrote verifies as
// it is, opens after a backup, reads back everything written, and moves
// its legacy head and environment samples into chunks with the next
// compaction, nothing lost or doubled.
func TestSchema2StoreOpens(t *testing.T) {
	if p, err := Verify(v2FixtureDir); err != nil || len(p) != 0 {
		t.Fatalf("Verify of the schema-2 file: %q %v", p, err)
	}
	dir := t.TempDir()
	raw, err := os.ReadFile(filepath.Join(v2FixtureDir, FileName))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, FileName), raw, 0o600); err != nil {
		t.Fatal(err)
	}
	s := openTest(t, dir, Options{NoSync: true, CompactEvery: -1})
	if baks, _ := filepath.Glob(filepath.Join(dir, FileName+".schema2-*.bak")); len(baks) != 1 {
		t.Fatalf("backups before the upgrade: %q", baks)
	}
	want := map[string][]Reading{}
	for _, r := range v1Readings() {
		want[r.Counter] = append(want[r.Counter], r)
	}
	check := func(stage string) {
		t.Helper()
		for c, rs := range want {
			got := scanAll(t, s, c, time.Time{}, time.Time{})
			if !reflect.DeepEqual(got, rs) {
				t.Fatalf("%s: %s: %d readings differ from the %d written", stage, c, len(got), len(rs))
			}
			compareRollups(t, rollupsAll(t, s, c, time.Hour), recompute(t, s, c, time.Hour))
		}
		var ps []Pressure
		if err := s.ScanPressure("dp-asm", time.Time{}, time.Time{}, func(p Pressure) error { ps = append(ps, p); return nil }); err != nil || !reflect.DeepEqual(ps, v1Pressure()) {
			t.Fatalf("%s: pressure %d samples, %v", stage, len(ps), err)
		}
		var es []EnvSample
		if err := s.ScanEnvironment("th-asm", time.Time{}, time.Time{}, func(e EnvSample) error { es = append(es, e); return nil }); err != nil || !reflect.DeepEqual(es, v2Env()) {
			t.Fatalf("%s: environment %d samples, %v", stage, len(es), err)
		}
	}
	check("as upgraded")
	if n := headCount(t, s, "pc-met"); n == 0 {
		t.Fatal("the fixture's legacy head is empty: the test would prove nothing about it")
	}
	compactOK(t, s)
	for c := range want {
		if n := headCount(t, s, c); n != 0 {
			t.Fatalf("%s: %d readings left in the head after compaction", c, n)
		}
	}
	check("compacted")
	if _, dup := appendOK(t, s, want["pc-met"][:10]); dup != 10 {
		t.Fatalf("%d duplicates of upgraded readings, want 10", dup)
	}
	_ = s.Close()
	if p, err := Verify(dir); err != nil || len(p) != 0 {
		t.Fatalf("Verify: %q %v", p, err)
	}
}

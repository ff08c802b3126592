package site

import (
	"strings"
	"testing"
	"time"
)

// The queries section is read, and a negative bound is refused naming
// the key.
func TestQueriesSection(t *testing.T) {
	base := "site: \"Veldmark Photonics, building C\"\nzones:\n  - {id: hood, class: 5, area_m2: 2, sizes: [\"0.5\"], locations: [{id: h-1}]}\ncounters:\n  - {id: pc-hood, zone: hood, location: h-1, sizes: [\"0.5\"]}\n"
	cfg, err := Load("site.yaml", []byte(base+"queries: {max_raw_range: \"720h\", heavy_per_token: 3}\n"))
	if err != nil {
		t.Fatal(err)
	}
	if time.Duration(cfg.Queries.MaxRawRange) != 720*time.Hour || cfg.Queries.HeavyPerToken != 3 {
		t.Errorf("queries %+v", cfg.Queries)
	}
	for _, bad := range []struct{ yaml, key string }{
		{"queries: {max_raw_range: \"-1h\"}\n", "queries.max_raw_range"},
		{"queries: {heavy_per_token: -2}\n", "queries.heavy_per_token"},
	} {
		_, err := Load("site.yaml", []byte(base+bad.yaml))
		if err == nil || !strings.Contains(err.Error(), bad.key) {
			t.Errorf("%q: %v, want an error naming %s", bad.yaml, err, bad.key)
		}
	}
}

package site

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"cleanmon/cmd/cleanmon/internal/access"
)

// baseSite is a valid configuration; each case below changes one line of
// it, so that the expected line and column can be read off this text.
var baseSite = strings.Join([]string{
	/* 1 */ `site: test`,
	/* 2 */ `zones:`,
	/* 3 */ `  - id: hood`,
	/* 4 */ `    class: 5`,
	/* 5 */ `    area_m2: 2`,
	/* 6 */ `    sizes: ["0.5", "1"]`,
	/* 7 */ `    levels: {"0.5": {alert: 1000, action: 2000}}`,
	/* 8 */ `    locations: [{id: h-1}]`,
	/* 9 */ `counters:`,
	/* 10 */ `  - {id: pc-h, zone: hood, location: h-1, sizes: ["0.3", "0.5", "1", "5"]}`,
	/* 11 */ `pressure_sensors:`,
	/* 12 */ `  - {id: dp-h, high: hood, low: corridor, min_pa: 5}`,
	/* 13 */ `access:`,
	/* 14 */ `  tokens:`,
	/* 15 */ `    - {name: scada, sha256: "70da8e2bf5aaad6f048f92ad469287106382fdee1add310e2fcd8cd7a626336c", role: ingest}`,
}, "\n") + "\n"

// editLine replaces line n (1-based) of baseSite.
func editLine(n int, text string) string {
	lines := strings.Split(baseSite, "\n")
	lines[n-1] = text
	return strings.Join(lines, "\n")
}

func TestLoadConfigBase(t *testing.T) {
	cfg, err := Load("site.yaml", []byte(baseSite))
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Site != "test" || len(cfg.Zones) != 1 || *cfg.Zones[0].Class != 5 || len(cfg.Counters) != 1 ||
		len(cfg.PressureSensors) != 1 || cfg.Access.Tokens[0].Role != access.RoleIngest {
		t.Fatalf("decoded %+v", cfg)
	}
	if cfg.RetentionOrDefault() != defaultRetention {
		t.Errorf("retention %s", cfg.RetentionOrDefault())
	}
}

func TestLoadConfigProblems(t *testing.T) {
	cases := []struct {
		name string
		yaml string
		want []string // each must begin one of the problem lines
	}{
		{"unknown top-level key", editLine(1, "sitename: test"),
			[]string{"site.yaml:1:1: sitename: unknown key"}},
		{"unknown zone key", editLine(4, "    clas: 5"),
			[]string{"site.yaml:4:5: zones[0].clas: unknown key (known here: id, name, class, grade"}},
		{"number expected", editLine(5, "    area_m2: big"),
			[]string{`site.yaml:5:14: zones[0].area_m2: want a number, got "big"`}},
		{"list where a value belongs", editLine(1, "site: [a, b]"),
			[]string{"site.yaml:1:7: site: want a single value, not a list"}},
		{"bad duration", editLine(1, "retention: soon"),
			[]string{`site.yaml:1:12: retention: "soon" is not a duration`}},
		{"class out of range", editLine(4, "    class: 12"),
			[]string{"site.yaml:4:12: zones[0].class: classify: invalid ISO class: 12 is outside 1–9"}},
		// ISO 14644-1:2015 Table 1: no limit for ISO 5 at 5 µm (macroparticle descriptor).
		{"blank ISO cell", editLine(6, `    sizes: ["0.5", "5"]`),
			[]string{"site.yaml:6:20: zones[0].sizes[1]: ISO class 5 (2015 edition) has no limit at 5 µm: ≥5 µm at ISO 5 is specified only through the macroparticle"}},
		{"alert above action", editLine(7, `    levels: {"0.5": {alert: 3000, action: 2000}}`),
			[]string{"site.yaml:7:29: zones[0].levels.0.5.alert: alert level 3000 is above the action level 2000"}},
		// ISO 5 at 0.5 µm: 3 520 /m³ (ISO 14644-1:2015 Table 1).
		{"action above limit", editLine(7, `    levels: {"0.5": {alert: 1000, action: 4000}}`),
			[]string{"site.yaml:7:43: zones[0].levels.0.5.action: action level 4000 is above the ISO class 5 limit 3520"}},
		{"missing zone id", editLine(3, "  - name: hood"),
			[]string{"site.yaml:3:5: zones[0].id: missing"}},
		{"location without counter", editLine(8, "    locations: [{id: h-1}, {id: h-2}]"),
			[]string{`site.yaml:8:33: zones[0].locations[1].id: no counter samples location "h-2"`}},
		{"counter of unknown zone", editLine(10, `  - {id: pc-h, zone: lab, location: h-1, sizes: ["0.3", "0.5", "1", "5"]}`),
			[]string{`site.yaml:10:22: counters[0].zone: unknown zone "lab"`}},
		{"counter at unknown location", editLine(10, `  - {id: pc-h, zone: hood, location: h-9, sizes: ["0.3", "0.5", "1", "5"]}`),
			[]string{`site.yaml:10:38: counters[0].location: "h-9" is not a location of zone "hood"`}},
		{"counter without a zone size", editLine(10, `  - {id: pc-h, zone: hood, location: h-1, sizes: ["0.3", "0.5"]}`),
			[]string{"site.yaml:10:50: counters[0].sizes: counter has no 1 µm channel"}},
		{"counter flow", editLine(10, `  - {id: pc-h, zone: hood, location: h-1, flow_lpm: -1, sizes: ["0.3", "0.5", "1", "5"]}`),
			[]string{"site.yaml:10:53: counters[0].flow_lpm: must be a positive flow"}},
		{"sensor of unknown zone", editLine(12, "  - {id: dp-h, high: lab, low: corridor, min_pa: 5}"),
			[]string{`site.yaml:12:22: pressure_sensors[0].high: unknown zone "lab"`}},
		{"token not hex", editLine(15, `    - {name: scada, sha256: "xyz", role: ingest}`),
			[]string{"site.yaml:15:29: access.tokens[0].sha256: want the SHA-256 of the secret as 64 hex digits"}},
		{"token role", editLine(15, `    - {name: scada, sha256: "70da8e2bf5aaad6f048f92ad469287106382fdee1add310e2fcd8cd7a626336c", role: boss}`),
			[]string{`site.yaml:15:103: access.tokens[0].role: "boss": want ingest, viewer, operator or admin`}},
		{"token names twice", baseSite + `    - {name: scada, sha256: "ea6109c107e31ad4284f35fadcf95b17bf2be3a048b78b64078df451bf96ac11", role: viewer}` + "\n",
			[]string{`site.yaml:16:14: access.tokens[1].name: token name "scada" already used at access.tokens[0]`}},
		{"same secret twice", baseSite + `    - {name: wall, sha256: "70DA8E2BF5AAAD6F048F92AD469287106382FDEE1ADD310E2FCD8CD7A626336C", role: viewer}` + "\n",
			[]string{"site.yaml:16:28: access.tokens[1].sha256: same secret as access.tokens[0]"}},
		{"key twice", editLine(5, "    class: 6"),
			[]string{"site.yaml:5:5: zones[0].class: key given twice (first at line 4)"}},
		{"listen without port", editLine(1, "listen: localhost"),
			[]string{`site.yaml:1:9: listen: "localhost" is not host:port`}},
		{"empty file", "", []string{"site.yaml:1:1: empty configuration"}},
		{"syntax error", editLine(6, `    sizes: ["0.5", "1"`), []string{"site.yaml:"}},
		{"several problems at once", strings.Replace(editLine(1, "sitename: test"), "    class: 5", "    class: 12", 1),
			[]string{"site.yaml:1:1: sitename: unknown key", "site.yaml:4:12: zones[0].class:"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg, err := Load("site.yaml", []byte(c.yaml))
			if err == nil {
				t.Fatalf("accepted: %+v", cfg)
			}
			if !errors.Is(err, ErrInvalid) {
				t.Errorf("error %v does not wrap ErrInvalid", err)
			}
			lines := strings.Split(err.Error(), "\n")
			for _, w := range c.want {
				found := false
				for _, l := range lines {
					found = found || strings.HasPrefix(l, w)
				}
				if !found {
					t.Errorf("no problem starting %q in:\n%s", w, err)
				}
			}
		})
	}
}

// TestCoveredProblemsDropped: a field that failed to decode is not also
// reported by the checks that see its zero value.
func TestCoveredProblemsDropped(t *testing.T) {
	_, err := Load("site.yaml", []byte(editLine(5, "    area_m2: big")))
	if err == nil || strings.Contains(err.Error(), "area_m2: missing") || strings.Count(err.Error(), "\n") != 0 {
		t.Fatalf("want exactly the decode problem, got:\n%v", err)
	}
}

func TestMergeKeysAndAliases(t *testing.T) {
	y := strings.Replace(baseSite, "counters:\n", "counters:\n  - &pc {id: pc-x, zone: hood, location: h-1, sizes: [\"0.5\", \"1\"], bogus: 1}\n", 1)
	_, err := Load("site.yaml", []byte(y))
	if err == nil || !strings.Contains(err.Error(), "site.yaml:10:") || !strings.Contains(err.Error(), "counters[0].bogus: unknown key") {
		t.Fatalf("anchored mapping not checked: %v", err)
	}
	y = strings.Replace(baseSite, "  - id: hood\n", "  - &z\n    id: hood\n", 1)
	y = strings.Replace(y, "counters:\n", "  - <<: *z\n    id: hood-2\n    locations: [{id: h-1}]\ncounters:\n  - {id: pc-h2, zone: hood-2, location: h-1, sizes: [\"0.5\", \"1\"]}\n", 1)
	cfg, err := Load("site.yaml", []byte(y))
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Zones) != 2 || cfg.Zones[1].ID != "hood-2" || cfg.Zones[1].Class == nil || *cfg.Zones[1].Class != 5 || cfg.Zones[1].AreaM2 != 2 {
		t.Fatalf("merge key: %+v", cfg.Zones[1])
	}
}

func TestShippedConfigsLoadClean(t *testing.T) {
	for _, path := range []string{"../../../../deploy/cleanmon.example.yaml", "../../../../testdata/site-minimal.yaml"} {
		t.Run(filepath.Base(path), func(t *testing.T) {
			cfg, err := LoadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			if len(cfg.Zones) == 0 || len(cfg.Counters) == 0 {
				t.Fatalf("empty: %+v", cfg)
			}
		})
	}
	cfg, err := Demo()
	if err != nil {
		t.Fatal(err)
	}
	// the demo site: five zones, six counters, four DP sensors (one per
	// "pressure to" entry), pc-met at 2.83 L/min.
	if len(cfg.Zones) != 5 || len(cfg.Counters) != 6 || len(cfg.PressureSensors) != 4 {
		t.Fatalf("demo site: %d zones, %d counters, %d sensors", len(cfg.Zones), len(cfg.Counters), len(cfg.PressureSensors))
	}
	want := map[string]float64{"coating-hood": 5, "assembly": 7, "metrology": 6, "gowning": 8}
	for _, z := range cfg.Zones {
		if c, ok := want[z.ID]; ok && (z.Class == nil || *z.Class != c) {
			t.Errorf("%s: class %v, want %v", z.ID, z.Class, c)
		}
		if z.ID == "corridor" && (z.Class != nil || z.Grade != "") {
			t.Errorf("corridor classified")
		}
		if z.ID == "gowning" && z.OperatingState != "at-rest" {
			t.Errorf("gowning %s", z.OperatingState)
		}
	}
	for _, k := range cfg.Counters {
		if k.ID == "pc-met" && k.FlowLPM != 2.83 {
			t.Errorf("pc-met flow %v", k.FlowLPM)
		}
	}
	if time.Duration(cfg.Zones[0].Window) != 10*time.Minute {
		t.Errorf("window %v", cfg.Zones[0].Window)
	}
}

func TestConfigFileTooLarge(t *testing.T) {
	p := filepath.Join(t.TempDir(), "big.yaml")
	if err := os.WriteFile(p, bytes.Repeat([]byte("#\n"), maxConfigBytes/2+1), 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadFile(p); err == nil || !strings.Contains(err.Error(), "larger than") {
		t.Fatalf("err %v", err)
	}
}

// Every duration of the configuration is read one way, whichever section
// holds it: Prometheus's syntax, which has days and years (a retention of
// ten years is "3650d"), and refuses a bare number, whose unit would be a
// guess.
func TestDurations(t *testing.T) {
	for _, c := range []struct {
		in   string
		want time.Duration
		bad  bool
	}{
		{"3650d", 3650 * 24 * time.Hour, false},
		{"1y", 365 * 24 * time.Hour, false},
		{"30d", 30 * 24 * time.Hour, false},
		{"87600h", 87600 * time.Hour, false},
		{"1h30m", 90 * time.Minute, false},
		{"30", 0, true},
		{"-1h", 0, true},
		{"soon", 0, true},
		{"[1h]", 0, true},
	} {
		cfg, err := Load("site.yaml", []byte(baseSite+"retention: "+c.in+"\n"))
		if c.bad {
			if err == nil || !strings.Contains(err.Error(), "site.yaml:16:12: retention:") {
				t.Errorf("%s: %v, want a refusal at line 16", c.in, err)
			}
			continue
		}
		if err != nil {
			t.Errorf("%s: %v", c.in, err)
			continue
		}
		if got := time.Duration(cfg.Retention); got != c.want {
			t.Errorf("%s: %v, want %v", c.in, got, c.want)
		}
	}
	// The zone window, a section of another package, reads the same way.
	cfg, err := Load("site.yaml", []byte(strings.Replace(baseSite, "    area_m2: 2", "    area_m2: 2\n    window: 1d", 1)))
	if err != nil || time.Duration(cfg.Zones[0].Window) != 24*time.Hour {
		t.Errorf("window 1d: %v", err)
	}
}

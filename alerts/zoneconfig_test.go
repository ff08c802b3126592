package alerts

import (
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/model"
	"go.yaml.in/yaml/v3"
)

func TestValidateZones(t *testing.T) {
	cases := []struct {
		name   string
		mutate func(z *ZoneConfig)
		path   string // "" means valid
		msg    string
	}{
		{"valid", func(z *ZoneConfig) {}, "", ""},
		{"missing id", func(z *ZoneConfig) { z.ID = "" }, "zones[0].id", "missing"},
		{"id with slash", func(z *ZoneConfig) { z.ID = "a/b" }, "zones[0].id", "'/'"},
		{"class and grade", func(z *ZoneConfig) { z.Grade = "B" }, "zones[0].grade", "not both"},
		{"class out of range", func(z *ZoneConfig) { z.Class = fp(10) }, "zones[0].class", "outside 1–9"},
		{"class step", func(z *ZoneConfig) { z.Class = fp(6.55) }, "zones[0].class", "steps of 0.1"},
		{"bad grade", func(z *ZoneConfig) { z.Class = nil; z.Grade = "E" }, "zones[0].grade", "A, B, C or D"},
		{"grade without state", func(z *ZoneConfig) { z.Class = nil; z.Grade = "C"; z.OperatingState = ""; z.Levels = nil }, "zones[0].operating_state", "missing"},
		{"maintenance in config", func(z *ZoneConfig) { z.OperatingState = Maintenance }, "zones[0].operating_state", "run time"},
		{"bad state", func(z *ZoneConfig) { z.OperatingState = "busy" }, "zones[0].operating_state", "busy"},
		// ISO 14644-1:2015 Table 1 note: ISO 9 is for the in-operation state only.
		{"ISO 9 at rest", func(z *ZoneConfig) { z.Class = fp(9); z.OperatingState = AtRest; z.Levels = nil }, "zones[0].operating_state", "in-operation"},
		{"bad edition", func(z *ZoneConfig) { z.Edition = "2020" }, "zones[0].edition", "2015 or 1999"},
		{"no area", func(z *ZoneConfig) { z.AreaM2 = 0 }, "zones[0].area_m2", "missing"},
		{"negative area", func(z *ZoneConfig) { z.AreaM2 = -1 }, "zones[0].area_m2", "positive"},
		{"negative window", func(z *ZoneConfig) { z.Window = model.Duration(-time.Minute) }, "zones[0].window", "positive"},
		{"negative clean-up", func(z *ZoneConfig) { z.CleanUp = model.Duration(-time.Minute) }, "zones[0].clean_up", "positive"},
		{"own clean-up", func(z *ZoneConfig) { z.CleanUp = model.Duration(15 * time.Minute) }, "", ""},
		{"no sizes", func(z *ZoneConfig) { z.Sizes = nil; z.Levels = nil }, "zones[0].sizes", "missing"},
		{"bad size", func(z *ZoneConfig) { z.Sizes = []string{"0.5", "7"} }, "zones[0].sizes[1]", "outside"},
		{"size twice", func(z *ZoneConfig) { z.Sizes = []string{"0.5", "0.50"} }, "zones[0].sizes[1]", "twice"},
		// ISO 14644-1:2015 Table 1: ISO 7 is blank at 0.1 µm (too
		// concentrated for counters), so it is refused with the reason.
		{"blank ISO cell", func(z *ZoneConfig) { z.Sizes = []string{"0.1", "0.5"} }, "zones[0].sizes[0]", "too high for particle counters"},
		// ISO 5 at 5 µm: blank in 2015 (macroparticle descriptor), 29 in 1999.
		{"ISO 5 at 5 µm, 2015", func(z *ZoneConfig) { z.Class = fp(5); z.Levels = nil }, "zones[0].sizes[1]", "macroparticle"},
		{"ISO 5 at 5 µm, 1999", func(z *ZoneConfig) { z.Class = fp(5); z.Edition = "1999"; z.Levels = nil }, "", ""},
		{"GMP size", func(z *ZoneConfig) { z.Class = nil; z.Grade = "B"; z.Sizes = []string{"0.3"}; z.Levels = nil }, "zones[0].sizes[0]", "0.5 and 5"},
		{"duplicate location", func(z *ZoneConfig) { z.Locations = append(z.Locations, LocationConfig{ID: "asm-1"}) }, "zones[0].locations[2].id", "already defined"},
		{"empty location id", func(z *ZoneConfig) { z.Locations[1].ID = "" }, "zones[0].locations[1].id", "missing"},
		{"level on unknown size", func(z *ZoneConfig) { z.Levels["1"] = Levels{Alert: fp(1)} }, "zones[0].levels.1", "not one of the zone's sizes"},
		{"level key not a size", func(z *ZoneConfig) { z.Levels["big"] = Levels{Alert: fp(1)} }, "zones[0].levels.big", "not a size"},
		{"empty levels", func(z *ZoneConfig) { z.Levels["5"] = Levels{} }, "zones[0].levels.5", "alert level, an action level"},
		{"alert above action", func(z *ZoneConfig) { z.Levels["0.5"] = Levels{Alert: fp(300000), Action: fp(250000)} }, "zones[0].levels.0.5.alert", "above the action level"},
		// ISO 7 at 0.5 µm is 352 000 /m³ (ISO 14644-1:2015 Table 1).
		{"action above limit", func(z *ZoneConfig) { z.Levels["0.5"] = Levels{Action: fp(352001)} }, "zones[0].levels.0.5.action", "352000"},
		{"action at limit", func(z *ZoneConfig) { z.Levels["0.5"] = Levels{Action: fp(352000)} }, "", ""},
		{"alert above limit", func(z *ZoneConfig) { z.Levels["5"] = Levels{Alert: fp(3000)} }, "zones[0].levels.5.alert", "2930"},
		{"negative alert", func(z *ZoneConfig) { z.Levels["5"] = Levels{Alert: fp(-1)} }, "zones[0].levels.5.alert", "≥ 0"},
		{"zero action", func(z *ZoneConfig) { z.Levels["5"] = Levels{Action: fp(0)} }, "zones[0].levels.5.action", "> 0"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			z := assemblyZone()
			z.Levels = map[string]Levels{"0.5": {Alert: fp(100000), Action: fp(250000)}}
			c.mutate(&z)
			errs := ValidateZones([]ZoneConfig{z})
			if c.path == "" {
				if len(errs) != 0 {
					t.Fatalf("want valid, got %v", errs)
				}
				return
			}
			for _, e := range errs {
				if e.Path == c.path && strings.Contains(e.Msg, c.msg) {
					return
				}
			}
			t.Fatalf("want %s: …%s…, got %v", c.path, c.msg, errs)
		})
	}
}

func TestValidateZonesDuplicateIDs(t *testing.T) {
	a, b := assemblyZone(), assemblyZone()
	errs := ValidateZones([]ZoneConfig{a, b})
	if len(errs) != 1 || errs[0].Path != "zones[1].id" || !strings.Contains(errs[0].Msg, "zones[0]") {
		t.Fatalf("errs %v", errs)
	}
}

func TestLevelsInForce(t *testing.T) {
	clk := &fakeClock{t: t0}
	tr := newTracker(t, clk, []ZoneConfig{assemblyZone()}, nil)
	v, _ := tr.Zone("assembly")
	// 0.5 µm: configured alert 100 000 and action 250 000; 5 µm: no levels,
	// so the action level is the ISO 7 limit 2 930 (ISO 14644-1:2015 Table 1).
	l05, l5 := v.Limits[0], v.Limits[1]
	if *l05.Limit != 352000 || *l05.Alert != 100000 || *l05.Action != 250000 {
		t.Errorf("0.5 µm: %v %v %v", *l05.Limit, *l05.Alert, *l05.Action)
	}
	if *l5.Limit != 2930 || l5.Alert != nil || *l5.Action != 2930 {
		t.Errorf("5 µm: %+v", l5)
	}
}

func TestDurationYAML(t *testing.T) {
	var v struct {
		W model.Duration `yaml:"w"`
	}
	if err := yaml.Unmarshal([]byte("w: 90s"), &v); err != nil || time.Duration(v.W) != 90*time.Second {
		t.Fatalf("%v %v", v.W, err)
	}
	if err := yaml.Unmarshal([]byte("w: soon"), &v); err == nil || !strings.Contains(err.Error(), "soon") {
		t.Fatalf("err %v", err)
	}
	out, err := yaml.Marshal(v)
	if err != nil || strings.TrimSpace(string(out)) != "w: 1m30s" {
		t.Fatalf("%q %v", out, err)
	}
}

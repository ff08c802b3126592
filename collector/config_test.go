package collector

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/common/model"
	"go.yaml.in/yaml/v3"
)

var demoZones = map[string]bool{"coating-hood": true, "assembly": true, "metrology": true, "gowning": true, "corridor": true}

// siteYAML is the collector part of a site configuration for the demo site
// of the invented demo site.
const siteYAML = `
counters:
  - id: pc-hood
    zone: coating-hood
    sizes: ["0.3", "0.5", "5"]
    interval: 1m
    max_per_m3: 4000000
  - id: pc-met
    zone: metrology
    location: met-bench
    flow_lpm: 2.83
    sizes: ["0.3um", "0.5um", "1um", "5um"]
    mode: differential
    interval: 30s
sensors:
  - id: dp-asm-gown
    high: assembly
    low: gowning
    min_pa: 8
    max_pa: 30
    delay: 45s
  - id: dp-gown-corr
    high: gowning
    low: corridor
    min_pa: 8
`

type siteSection struct {
	Counters []Counter `yaml:"counters"`
	Sensors  []Sensor  `yaml:"sensors"`
}

func TestConfigFromYAML(t *testing.T) {
	var cfg siteSection
	if err := yaml.Unmarshal([]byte(siteYAML), &cfg); err != nil {
		t.Fatal(err)
	}
	if errs := ValidateCounters(cfg.Counters, demoZones); len(errs) > 0 {
		t.Fatalf("counters: %v", errs)
	}
	if errs := ValidateSensors(cfg.Sensors, demoZones); len(errs) > 0 {
		t.Fatalf("sensors: %v", errs)
	}
	reg, err := NewRegistry(cfg.Counters, cfg.Sensors)
	if err != nil {
		t.Fatal(err)
	}
	hood, ok := reg.Counter("pc-hood")
	if !ok {
		t.Fatal("pc-hood missing")
	}
	// Defaults: 28.3 L/min (ISO 21501-4 practice, from memory), cumulative, push,
	// location = id.
	if hood.FlowLPM != DefaultFlowLPM || hood.Mode != ModeCumulative || hood.Source != SourcePush || hood.Location != "pc-hood" || time.Duration(hood.Interval) != time.Minute {
		t.Errorf("pc-hood defaults: %+v", hood.Counter)
	}
	met, _ := reg.Counter("pc-met")
	if met.Location != "met-bench" || met.FlowLPM != 2.83 || met.Mode != ModeDifferential || time.Duration(met.Interval) != 30*time.Second {
		t.Errorf("pc-met: %+v", met.Counter)
	}
	if got := strings.Join(met.Keys, ","); got != "0.3,0.5,1,5" {
		t.Errorf("pc-met keys %s", got)
	}
	for key, want := range map[string]int{"0.3": 0, "0.3um": 0, "0.30 µm": 0, "5": 3, "5.00um": 3} {
		if ch, ok := met.Channel(key); !ok || ch != want {
			t.Errorf("Channel(%q) = %d %v, want %d", key, ch, ok, want)
		}
	}
	if _, ok := met.Channel("0.7"); ok {
		t.Error("Channel(0.7) found")
	}
	dp, _ := reg.Sensor("dp-asm-gown")
	if time.Duration(dp.Delay) != 45*time.Second || time.Duration(dp.Interval) != DefaultSensorInterval || dp.MaxPa != 30 {
		t.Errorf("dp-asm-gown: %+v", dp.Sensor)
	}
	corr, _ := reg.Sensor("dp-gown-corr")
	if time.Duration(corr.Delay) != DefaultSensorDelay {
		t.Errorf("dp-gown-corr delay %s, want the default %s", corr.Delay, DefaultSensorDelay)
	}
	if ids := reg.Counters(); len(ids) != 2 || ids[0].ID != "pc-hood" || ids[1].ID != "pc-met" {
		t.Errorf("Counters() order: %v", ids)
	}
	if _, ok := reg.Sensor("dp-nowhere"); ok {
		t.Error("unknown sensor found")
	}
	out, err := yaml.Marshal(cfg)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(out), "interval: 30s") || !strings.Contains(string(out), "delay: 45s") {
		t.Errorf("durations not written as strings:\n%s", out)
	}
}

func TestValidateCounters(t *testing.T) {
	ok := func() Counter {
		return Counter{ID: "pc-asm-1", Zone: "assembly", Sizes: []string{"0.5", "1", "5"}}
	}
	cases := []struct {
		name  string
		edit  func(cs []Counter) []Counter
		paths []string
	}{
		{"good", func(cs []Counter) []Counter { return cs }, nil},
		{"id missing", func(cs []Counter) []Counter { cs[0].ID = ""; return cs }, []string{"counters[0].id"}},
		{"id with a space", func(cs []Counter) []Counter { cs[0].ID = "pc asm"; return cs }, []string{"counters[0].id"}},
		{"id starting with a dash", func(cs []Counter) []Counter { cs[0].ID = "-pc"; return cs }, []string{"counters[0].id"}},
		{"id too long", func(cs []Counter) []Counter { cs[0].ID = strings.Repeat("p", 65); return cs }, []string{"counters[0].id"}},
		{"duplicate id", func(cs []Counter) []Counter {
			c := ok()
			c.Location = "other"
			return append(cs, c)
		}, []string{"counters[1].id"}},
		{"zone missing", func(cs []Counter) []Counter { cs[0].Zone = ""; return cs }, []string{"counters[0].zone"}},
		{"zone unknown", func(cs []Counter) []Counter { cs[0].Zone = "lab"; return cs }, []string{"counters[0].zone"}},
		{"two counters at one location", func(cs []Counter) []Counter {
			c := ok()
			c.ID, c.Location = "pc-asm-2", "pc-asm-1"
			return append(cs, c)
		}, []string{"counters[1].location"}},
		{"flow negative", func(cs []Counter) []Counter { cs[0].FlowLPM = -28.3; return cs }, []string{"counters[0].flow_lpm"}},
		{"flow NaN", func(cs []Counter) []Counter { cs[0].FlowLPM = math.NaN(); return cs }, []string{"counters[0].flow_lpm"}},
		{"sizes missing", func(cs []Counter) []Counter { cs[0].Sizes = nil; return cs }, []string{"counters[0].sizes"}},
		{"size unparsable", func(cs []Counter) []Counter { cs[0].Sizes = []string{"0.5", "one"}; return cs }, []string{"counters[0].sizes[1]"}},
		{"size out of range", func(cs []Counter) []Counter { cs[0].Sizes = []string{"0.05", "0.5"}; return cs }, []string{"counters[0].sizes[0]"}},
		{"sizes descending", func(cs []Counter) []Counter { cs[0].Sizes = []string{"0.5", "5", "1"}; return cs }, []string{"counters[0].sizes[2]"}},
		{"size repeated in another spelling", func(cs []Counter) []Counter { cs[0].Sizes = []string{"0.5", "0.5um", "5"}; return cs }, []string{"counters[0].sizes[1]"}},
		{"mode unknown", func(cs []Counter) []Counter { cs[0].Mode = "per-litre"; return cs }, []string{"counters[0].mode"}},
		{"interval negative", func(cs []Counter) []Counter { cs[0].Interval = model.Duration(-time.Second); return cs }, []string{"counters[0].interval"}},
		{"interval too short", func(cs []Counter) []Counter { cs[0].Interval = model.Duration(100 * time.Millisecond); return cs }, []string{"counters[0].interval"}},
		{"max concentration negative", func(cs []Counter) []Counter { cs[0].MaxPerM3 = -1; return cs }, []string{"counters[0].max_per_m3"}},
		{"source modbus not yet", func(cs []Counter) []Counter { cs[0].Source = SourceModbus; return cs }, []string{"counters[0].source"}},
		{"source unknown", func(cs []Counter) []Counter { cs[0].Source = "carrier-pigeon"; return cs }, []string{"counters[0].source"}},
		{"several at once", func(cs []Counter) []Counter {
			cs[0].FlowLPM, cs[0].Mode = -1, "x"
			return cs
		}, []string{"counters[0].flow_lpm", "counters[0].mode"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			errs := ValidateCounters(c.edit([]Counter{ok()}), demoZones)
			checkPaths(t, errs, c.paths)
		})
	}
	// Without a zone list, zones are not checked (NewRegistry's use).
	c := ok()
	c.Zone = "lab"
	if errs := ValidateCounters([]Counter{c}, nil); len(errs) != 0 {
		t.Errorf("zone checked without a zone list: %v", errs)
	}
}

func TestValidateSensors(t *testing.T) {
	ok := func() Sensor { return Sensor{ID: "dp-asm-gown", High: "assembly", Low: "gowning", MinPa: 8} }
	cases := []struct {
		name  string
		edit  func(ss []Sensor) []Sensor
		paths []string
	}{
		{"good", func(ss []Sensor) []Sensor { return ss }, nil},
		{"low an unclassified area", func(ss []Sensor) []Sensor { ss[0].Low = "loading-dock"; return ss }, nil},
		{"id missing", func(ss []Sensor) []Sensor { ss[0].ID = ""; return ss }, []string{"sensors[0].id"}},
		{"duplicate id", func(ss []Sensor) []Sensor { return append(ss, ok()) }, []string{"sensors[1].id"}},
		{"high missing", func(ss []Sensor) []Sensor { ss[0].High = ""; return ss }, []string{"sensors[0].high"}},
		{"high unknown", func(ss []Sensor) []Sensor { ss[0].High = "lab"; return ss }, []string{"sensors[0].high"}},
		{"low missing", func(ss []Sensor) []Sensor { ss[0].Low = ""; return ss }, []string{"sensors[0].low"}},
		{"low same as high", func(ss []Sensor) []Sensor { ss[0].Low = "assembly"; return ss }, []string{"sensors[0].low"}},
		{"low malformed", func(ss []Sensor) []Sensor { ss[0].Low = "the corridor"; return ss }, []string{"sensors[0].low"}},
		{"min negative", func(ss []Sensor) []Sensor { ss[0].MinPa = -8; return ss }, []string{"sensors[0].min_pa"}},
		{"min infinite", func(ss []Sensor) []Sensor { ss[0].MinPa = math.Inf(1); return ss }, []string{"sensors[0].min_pa"}},
		{"max below min", func(ss []Sensor) []Sensor { ss[0].MaxPa = 5; return ss }, []string{"sensors[0].max_pa"}},
		{"max negative", func(ss []Sensor) []Sensor { ss[0].MaxPa = -1; return ss }, []string{"sensors[0].max_pa"}},
		{"delay negative", func(ss []Sensor) []Sensor { ss[0].Delay = model.Duration(-time.Second); return ss }, []string{"sensors[0].delay"}},
		{"interval too short", func(ss []Sensor) []Sensor { ss[0].Interval = model.Duration(time.Millisecond); return ss }, []string{"sensors[0].interval"}},
		{"source unknown", func(ss []Sensor) []Sensor { ss[0].Source = "x"; return ss }, []string{"sensors[0].source"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			checkPaths(t, ValidateSensors(c.edit([]Sensor{ok()}), demoZones), c.paths)
		})
	}
}

func checkPaths(t *testing.T, errs []FieldError, want []string) {
	t.Helper()
	var got []string
	for _, e := range errs {
		got = append(got, e.Path)
		if e.Msg == "" || !strings.HasPrefix(e.Error(), e.Path+": ") {
			t.Errorf("error %q lacks a message or its path", e.Error())
		}
	}
	if strings.Join(got, " ") != strings.Join(want, " ") {
		t.Errorf("paths %v, want %v (%v)", got, want, errs)
	}
}

func TestNewRegistryRefusesBadConfig(t *testing.T) {
	cs := demoCounters()
	cs[2].Sizes = []string{"5", "0.5"}
	ss := demoSensors()
	ss[1].MinPa = -1
	_, err := NewRegistry(cs, ss)
	if !errors.Is(err, ErrConfig) {
		t.Fatalf("error %v, want ErrConfig", err)
	}
	var fe FieldError
	if !errors.As(err, &fe) || fe.Path != "counters[2].sizes[1]" {
		t.Errorf("first FieldError %+v", fe)
	}
	for _, p := range []string{"counters[2].sizes[1]", "sensors[1].min_pa"} {
		if !strings.Contains(err.Error(), p) {
			t.Errorf("error %q does not name %s", err, p)
		}
	}
	if strings.Contains(err.Error(), "\n") {
		t.Errorf("error spans lines: %q", err)
	}
}

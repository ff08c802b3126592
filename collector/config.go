package collector

import (
	"fmt"
	"math"
	"time"

	"cleanmon/classify"

	"github.com/prometheus/common/model"
)

// Mode says how a counter reports its size channels.
type Mode string

// The two ways a counter may report its channels.
const (
	// ModeCumulative: each channel counts particles at or above its
	// threshold, so counts cannot grow with size.
	ModeCumulative Mode = "cumulative"
	// ModeDifferential: each channel counts particles from its threshold up
	// to the next channel's; the last channel is open-ended.
	ModeDifferential Mode = "differential"
)

// Sources a counter or sensor may be read from.
const (
	// SourcePush: the instrument (or a gateway) posts to the HTTP API.
	SourcePush = "push"
	// SourceModbus: the daemon polls the instrument over Modbus TCP, as
	// its modbus section ([ModbusSource]) says.
	SourceModbus = "modbus"
	// SourceMQTT: the instrument (or a gateway) publishes to the broker of
	// the mqtt section; its data takes the same path as pushed data. The
	// site configuration checks that a topic carries it.
	SourceMQTT = "mqtt"
)

// Defaults applied to fields left empty in the configuration.
const (
	// DefaultFlowLPM is the usual nominal sample flow, 1 ft³/min (EU GMP
	// Annex 1 practice, from memory).
	DefaultFlowLPM = 28.3
	// DefaultCounterInterval is the expected sample period of a counter.
	DefaultCounterInterval = time.Minute
	// DefaultSensorInterval is the expected reporting period of a DP sensor.
	DefaultSensorInterval = 10 * time.Second
	// DefaultSensorDelay is how long DP may stay below its minimum before an
	// alarm. A zero delay would make every door opening an alarm, so an
	// empty delay means this, not zero.
	DefaultSensorDelay = 30 * time.Second
	// MinInterval is the shortest sample or reporting period accepted:
	// faster reporting floods the record without telling anyone more.
	MinInterval = time.Second
	// maxIDLen bounds ids, which end up in URLs and metric labels.
	maxIDLen = 64
)

// Counter is the configuration of one particle counter at one sampling
// location (yaml section "counters").
type Counter struct {
	ID       string         `yaml:"id"`
	Zone     string         `yaml:"zone"`
	Location string         `yaml:"location"`   // sampling location id; defaults to ID
	FlowLPM  float64        `yaml:"flow_lpm"`   // nominal flow, default 28.3
	Sizes    []string       `yaml:"sizes"`      // channel thresholds, ascending, e.g. ["0.3","0.5","5"]
	Mode     Mode           `yaml:"mode"`       // default cumulative
	Interval model.Duration `yaml:"interval"`   // expected sample period, default 1m
	MaxPerM3 float64        `yaml:"max_per_m3"` // stated maximum concentration (ISO 21501-4 coincidence limit); 0 = unknown
	Source   string         `yaml:"source"`     // "push" (default), or "modbus" (the default when a modbus section is given)
	// Modbus is where and how to poll the counter when its source is modbus.
	Modbus *ModbusSource `yaml:"modbus"`
	// Model, Serial and CalibrationDue (a date, 2006-01-02: the last day
	// the calibration is valid) identify the instrument in certification
	// reports; the site configuration checks the date.
	Model          string `yaml:"model"`
	Serial         string `yaml:"serial"`
	CalibrationDue string `yaml:"calibration_due"`
}

// Sensor is the configuration of one differential-pressure sensor between
// two areas (yaml section "sensors").
type Sensor struct {
	ID       string         `yaml:"id"`
	High     string         `yaml:"high"`     // zone on the high-pressure side
	Low      string         `yaml:"low"`      // area on the low side: a zone or any unclassified area id ("corridor")
	MinPa    float64        `yaml:"min_pa"`   // minimum DP, ≥ 0
	MaxPa    float64        `yaml:"max_pa"`   // maximum DP; 0 = none
	Delay    model.Duration `yaml:"delay"`    // how long below min before an alarm, default 30s
	Interval model.Duration `yaml:"interval"` // expected reporting period, default 10s
	Source   string         `yaml:"source"`   // "push" (default), or "modbus" (the default when a modbus section is given)
	// Modbus is where and how to poll the sensor when its source is modbus.
	Modbus *ModbusSource `yaml:"modbus"`
}

// withDefaults returns the counter with empty fields filled in.
func (c Counter) withDefaults() Counter {
	if c.Location == "" {
		c.Location = c.ID
	}
	if c.FlowLPM == 0 {
		c.FlowLPM = DefaultFlowLPM
	}
	if c.Mode == "" {
		c.Mode = ModeCumulative
	}
	if c.Interval == 0 {
		c.Interval = model.Duration(DefaultCounterInterval)
	}
	if c.Source == "" {
		c.Source = defaultSource(c.Modbus != nil)
	}
	return c
}

// withDefaults returns the sensor with empty fields filled in.
func (s Sensor) withDefaults() Sensor {
	if s.Delay == 0 {
		s.Delay = model.Duration(DefaultSensorDelay)
	}
	if s.Interval == 0 {
		s.Interval = model.Duration(DefaultSensorInterval)
	}
	if s.Source == "" {
		s.Source = defaultSource(s.Modbus != nil)
	}
	return s
}

// ValidateCounters checks the counters section and returns every problem
// found, each naming its path ("counters[2].sizes[1]"). Ids must be unique
// and well formed, the zone known (zones == nil skips that check), the
// location unique within its zone, the sizes parseable, inside 0.1–5 µm,
// ascending and unique, the flow and maximum concentration non-negative
// and finite, the mode and source known, the interval at least 1 s, and
// the modbus section of a polled counter complete and consistent (one
// register per size, no register mapped twice).
func ValidateCounters(cs []Counter, zones map[string]bool) []FieldError {
	var errs []FieldError
	add := func(path, format string, args ...any) {
		errs = append(errs, FieldError{Path: path, Msg: fmt.Sprintf(format, args...)})
	}
	ids := make(map[string]int, len(cs))
	locs := make(map[[2]string]int, len(cs))
	for i, c := range cs {
		p := fmt.Sprintf("counters[%d]", i)
		if msg := checkID(c.ID); msg != "" {
			add(p+".id", "%s", msg)
		} else if j, dup := ids[c.ID]; dup {
			add(p+".id", "%q is already the id of counters[%d]", c.ID, j)
		} else {
			ids[c.ID] = i
		}
		switch {
		case c.Zone == "":
			add(p+".zone", "missing: name the zone the counter samples")
		case zones != nil && !zones[c.Zone]:
			add(p+".zone", "unknown zone %q", c.Zone)
		}
		loc := c.Location
		if loc == "" {
			loc = c.ID
		} else if msg := checkID(loc); msg != "" {
			add(p+".location", "%s", msg)
		}
		if loc != "" && c.Zone != "" {
			k := [2]string{c.Zone, loc}
			if j, dup := locs[k]; dup {
				add(p+".location", "location %q of zone %q is already sampled by counters[%d]", loc, c.Zone, j)
			} else {
				locs[k] = i
			}
		}
		if math.IsNaN(c.FlowLPM) || math.IsInf(c.FlowLPM, 0) || c.FlowLPM < 0 {
			add(p+".flow_lpm", "must be a positive flow in L/min (empty for %g)", DefaultFlowLPM)
		}
		checkSizes(p+".sizes", c.Sizes, add)
		switch c.Mode {
		case "", ModeCumulative, ModeDifferential:
		default:
			add(p+".mode", "unknown mode %q (cumulative or differential)", c.Mode)
		}
		checkInterval(p+".interval", c.Interval, add)
		if math.IsNaN(c.MaxPerM3) || math.IsInf(c.MaxPerM3, 0) || c.MaxPerM3 < 0 {
			add(p+".max_per_m3", "must be a concentration ≥ 0 particles/m³ (0 = unknown)")
		}
		if checkSource(p+".source", c.Source, c.Modbus != nil, add) {
			validateModbusCounter(p+".modbus", &c, add)
		}
	}
	return errs
}

// ValidateSensors checks the sensors section and returns every problem
// found, each naming its path ("sensors[0].min_pa"). Ids must be unique and
// well formed, high a known zone (zones == nil skips that check), low any
// well-formed area id other than high, min_pa finite and ≥ 0, max_pa 0 or
// above min_pa, delay ≥ 0, the interval at least 1 s, the source known,
// and the modbus section of a polled sensor complete.
func ValidateSensors(ss []Sensor, zones map[string]bool) []FieldError {
	var errs []FieldError
	add := func(path, format string, args ...any) {
		errs = append(errs, FieldError{Path: path, Msg: fmt.Sprintf(format, args...)})
	}
	ids := make(map[string]int, len(ss))
	for i, s := range ss {
		p := fmt.Sprintf("sensors[%d]", i)
		if msg := checkID(s.ID); msg != "" {
			add(p+".id", "%s", msg)
		} else if j, dup := ids[s.ID]; dup {
			add(p+".id", "%q is already the id of sensors[%d]", s.ID, j)
		} else {
			ids[s.ID] = i
		}
		switch {
		case s.High == "":
			add(p+".high", "missing: name the zone on the high-pressure side")
		case zones != nil && !zones[s.High]:
			add(p+".high", "unknown zone %q", s.High)
		}
		// The low side may be an unclassified area that is no configured
		// zone (a corridor), so only its form is checked.
		if s.Low == "" {
			add(p+".low", "missing: name the area on the low-pressure side")
		} else if msg := checkID(s.Low); msg != "" {
			add(p+".low", "%s", msg)
		} else if s.Low == s.High {
			add(p+".low", "is the same area as high (%q)", s.High)
		}
		minOK := !math.IsNaN(s.MinPa) && !math.IsInf(s.MinPa, 0) && s.MinPa >= 0
		if !minOK {
			add(p+".min_pa", "must be a pressure ≥ 0 Pa (put the higher-pressure area in high)")
		}
		switch {
		case math.IsNaN(s.MaxPa) || math.IsInf(s.MaxPa, 0) || s.MaxPa < 0:
			add(p+".max_pa", "must be a pressure > min_pa, or 0 for none")
		case s.MaxPa != 0 && minOK && s.MaxPa <= s.MinPa:
			add(p+".max_pa", "%g Pa is not above min_pa (%g Pa)", s.MaxPa, s.MinPa)
		}
		if s.Delay < 0 {
			add(p+".delay", "must not be negative")
		}
		checkInterval(p+".interval", s.Interval, add)
		if checkSource(p+".source", s.Source, s.Modbus != nil, add) {
			validateModbusSensor(p+".modbus", &s, add)
		}
	}
	return errs
}

func checkSizes(p string, sizes []string, add func(string, string, ...any)) {
	if len(sizes) == 0 {
		add(p, "missing: list the channel thresholds in µm, e.g. [\"0.3\", \"0.5\", \"5\"]")
		return
	}
	prev, prevAt := 0.0, -1
	for j, s := range sizes {
		v, err := classify.ParseSize(s)
		if err != nil {
			add(fmt.Sprintf("%s[%d]", p, j), "%v", err)
			continue
		}
		switch {
		case prevAt >= 0 && v == prev:
			add(fmt.Sprintf("%s[%d]", p, j), "%s µm repeats %s[%d]", classify.FormatSize(v), p, prevAt)
		case prevAt >= 0 && v < prev:
			add(fmt.Sprintf("%s[%d]", p, j), "%s µm after %s µm: list the sizes ascending", classify.FormatSize(v), classify.FormatSize(prev))
		}
		prev, prevAt = v, j
	}
}

func checkInterval(p string, d model.Duration, add func(string, string, ...any)) {
	switch {
	case d < 0:
		add(p, "must not be negative")
	case d != 0 && time.Duration(d) < MinInterval:
		add(p, "%s is shorter than the %s minimum", d, MinInterval)
	}
}

// checkSource checks the source against the presence of a modbus section
// and tells whether that section is to be checked.
func checkSource(p, s string, hasModbus bool, add func(string, string, ...any)) bool {
	switch s {
	case "":
		return hasModbus
	case SourcePush, SourceMQTT:
		if hasModbus {
			add(p, "is %q, but a modbus section is given: set source: %s, or remove the section", s, SourceModbus)
		}
	case SourceModbus:
		if !hasModbus {
			add(p, "%q needs a modbus section: the device's address and register map", s)
		}
		return hasModbus
	default:
		add(p, "unknown source %q (%q, %q or %q)", s, SourcePush, SourceModbus, SourceMQTT)
	}
	return false
}

func defaultSource(hasModbus bool) string {
	if hasModbus {
		return SourceModbus
	}
	return SourcePush
}

// checkID returns why id cannot name a counter, sensor or area, or "".
// Ids end up in URL paths and metric labels, so they are kept to letters,
// digits and . _ - starting with a letter or digit.
func checkID(id string) string {
	if id == "" {
		return "missing"
	}
	if len(id) > maxIDLen {
		return fmt.Sprintf("longer than %d characters", maxIDLen)
	}
	for i := 0; i < len(id); i++ {
		c := id[i]
		alnum := c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9'
		if !alnum && (i == 0 || c != '.' && c != '_' && c != '-') {
			return fmt.Sprintf("%q: use letters, digits, '.', '_' and '-', starting with a letter or digit", id)
		}
	}
	return ""
}

package collector

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"time"

	"github.com/prometheus/common/model"
)

// Kinds of environment sensor: what a sensor measures decides which
// fields its samples must carry and which bands its configuration may set.
const (
	// EnvTemperatureHumidity reports temperature_c and humidity_pct.
	EnvTemperatureHumidity = "temperature-humidity"
	// EnvTemperature reports temperature_c only.
	EnvTemperature = "temperature"
	// EnvHumidity reports humidity_pct only.
	EnvHumidity = "humidity"
	// EnvAirVelocity reports velocity_m_s, the airflow velocity at a
	// working position (a unidirectional-airflow hood).
	EnvAirVelocity = "air-velocity"
)

// Environment channels, named as their JSON fields and configuration keys.
const (
	ChanTemperature = "temperature_c" // °C
	ChanHumidity    = "humidity_pct"  // relative humidity, %
	ChanVelocity    = "velocity_m_s"  // m/s
)

// Defaults of an environment sensor.
const (
	// DefaultEnvironmentInterval is the expected reporting period.
	DefaultEnvironmentInterval = time.Minute
	// DefaultEnvironmentDelay is how long a value may stay outside its
	// band before an alarm: a door left open for a minute moves a room's
	// temperature without anything being wrong (common practice, no
	// source). An empty delay means this, not zero.
	DefaultEnvironmentDelay = 5 * time.Minute
)

// ErrEnvironment wraps failures of environment configuration that are
// not tied to one field (a registry built twice with sensors).
var ErrEnvironment = errors.New("collector: environment")

// EnvironmentBounds are the physical limits a value must lie within to be
// believed at all; anything outside them is a broken sensor or a wrong
// scaling, refused at the door. They are not the site's bands.
type EnvironmentBounds struct {
	MinTemperatureC float64 // default −50 °C
	MaxTemperatureC float64 // default 100 °C
	MinHumidityPct  float64 // default 0 %
	MaxHumidityPct  float64 // default 100 %
	MaxVelocityMS   float64 // default 20 m/s (velocity is never negative)
}

// DefaultEnvironmentBounds returns the bounds used when none are given:
// wide enough for any room, hood or plenum a cleanroom sensor sits in
// (common practice, no source).
func DefaultEnvironmentBounds() EnvironmentBounds {
	return EnvironmentBounds{MinTemperatureC: -50, MaxTemperatureC: 100, MinHumidityPct: 0, MaxHumidityPct: 100, MaxVelocityMS: 20}
}

// orDefault returns b, or the defaults when b is the zero value.
func (b EnvironmentBounds) orDefault() EnvironmentBounds {
	if b == (EnvironmentBounds{}) {
		return DefaultEnvironmentBounds()
	}
	return b
}

// check returns the problems of the bounds themselves.
func (b EnvironmentBounds) check() error {
	ok := finite(b.MinTemperatureC) && finite(b.MaxTemperatureC) && b.MinTemperatureC < b.MaxTemperatureC &&
		finite(b.MinHumidityPct) && finite(b.MaxHumidityPct) && b.MinHumidityPct >= 0 && b.MaxHumidityPct <= 100 && b.MinHumidityPct < b.MaxHumidityPct &&
		finite(b.MaxVelocityMS) && b.MaxVelocityMS > 0
	if !ok {
		return fmt.Errorf("%w: physical bounds %+v are not ranges (min < max, humidity within 0–100 %%, velocity max > 0)", ErrEnvironment, b)
	}
	return nil
}

// channelRange returns the physical range and unit of a channel.
func (b EnvironmentBounds) channelRange(ch string) (lo, hi float64, unit string) {
	switch ch {
	case ChanTemperature:
		return b.MinTemperatureC, b.MaxTemperatureC, "°C"
	case ChanHumidity:
		return b.MinHumidityPct, b.MaxHumidityPct, "%"
	default:
		return 0, b.MaxVelocityMS, "m/s"
	}
}

// kindChannels lists the channels each kind reports.
var kindChannels = map[string][]string{
	EnvTemperatureHumidity: {ChanTemperature, ChanHumidity},
	EnvTemperature:         {ChanTemperature},
	EnvHumidity:            {ChanHumidity},
	EnvAirVelocity:         {ChanVelocity},
}

// EnvironmentBand is one band of a channel: the value is inside while
// Low ≤ value ≤ High. Either side may be left open (nil).
type EnvironmentBand struct {
	Low  *float64 `yaml:"low" json:"low,omitempty"`
	High *float64 `yaml:"high" json:"high,omitempty"`
}

// EnvironmentLimits are the bands of one channel, in ISO 14644-2 terms: the
// alert band is the early warning, the action band the limit beyond which
// corrective action is needed. The action band, when both are given, holds
// the alert band.
type EnvironmentLimits struct {
	Alert  *EnvironmentBand `yaml:"alert"`
	Action *EnvironmentBand `yaml:"action"`
}

// EnvironmentSensorConfig is one temperature, humidity or airflow-velocity
// sensor (yaml section "environment" of the site configuration):
//
//	environment:
//	  - id: th-asm
//	    zone: assembly
//	    kind: temperature-humidity
//	    delay: 5m
//	    temperature_c: {alert: {low: 20.3, high: 21.7}, action: {low: 20, high: 22}}
//	    humidity_pct: {action: {low: 40, high: 50}}
//	  - id: av-hood
//	    zone: coating-hood
//	    kind: air-velocity
//	    delay: 1m
//	    velocity_m_s: {action: {low: 0.36, high: 0.54}}
//
// The bands are the site's: no standard sets temperature or humidity
// bands for a cleanroom.
type EnvironmentSensorConfig struct {
	ID   string `yaml:"id"`
	Zone string `yaml:"zone"` // the zone the sensor watches
	// Location is where in the zone it sits ("hood work position"); free
	// text for people, optional.
	Location string `yaml:"location"`
	// Kind is one of temperature-humidity, temperature, humidity,
	// air-velocity.
	Kind string `yaml:"kind"`
	// Delay is how long a value may stay outside a band before an alarm;
	// default 5m.
	Delay model.Duration `yaml:"delay"`
	// Interval is the expected reporting period, default 1m.
	Interval model.Duration `yaml:"interval"`
	// Source is "push" (default; HTTP or MQTT) or "modbus" (the default
	// when a modbus section is given).
	Source string `yaml:"source"`

	TemperatureC *EnvironmentLimits `yaml:"temperature_c"`
	HumidityPct  *EnvironmentLimits `yaml:"humidity_pct"`
	VelocityMS   *EnvironmentLimits `yaml:"velocity_m_s"`

	// Modbus is where and how to poll the sensor when its source is
	// modbus; its register map gives temperature_c, humidity_pct or
	// velocity_m_s as the kind needs.
	Modbus *ModbusSource `yaml:"modbus"`
}

// Limits returns the bands of channel ch (ChanTemperature, ...), or nil.
func (c *EnvironmentSensorConfig) Limits(ch string) *EnvironmentLimits {
	switch ch {
	case ChanTemperature:
		return c.TemperatureC
	case ChanHumidity:
		return c.HumidityPct
	case ChanVelocity:
		return c.VelocityMS
	}
	return nil
}

// Channels returns the channels the sensor's kind reports (nil for an
// unknown kind).
func (c *EnvironmentSensorConfig) Channels() []string { return kindChannels[c.Kind] }

func (c EnvironmentSensorConfig) withDefaults() EnvironmentSensorConfig {
	if c.Delay == 0 {
		c.Delay = model.Duration(DefaultEnvironmentDelay)
	}
	if c.Interval == 0 {
		c.Interval = model.Duration(DefaultEnvironmentInterval)
	}
	if c.Source == "" {
		c.Source = defaultSource(c.Modbus != nil)
	}
	return c
}

// ValidateEnvironmentSensors checks the environment section and returns
// every problem, each naming its path ("environment[1].temperature_c.
// action.low"). Ids must be well formed and unique, also against the ids
// in taken (the DP sensors: both are "sensor" in samples and metrics);
// the zone known (zones == nil skips that check); the kind known; bands
// given only for the kind's channels, each with low < high inside the
// physical bounds, the action band holding the alert band; delay ≥ 0;
// interval ≥ 1 s; the source known and a modbus section complete.
func ValidateEnvironmentSensors(es []EnvironmentSensorConfig, zones map[string]bool, taken map[string]bool, b EnvironmentBounds) []FieldError {
	b = b.orDefault()
	var errs []FieldError
	add := func(path, format string, args ...any) {
		errs = append(errs, FieldError{Path: path, Msg: fmt.Sprintf(format, args...)})
	}
	ids := make(map[string]int, len(es))
	for i, e := range es {
		p := fmt.Sprintf("environment[%d]", i)
		if msg := checkID(e.ID); msg != "" {
			add(p+".id", "%s", msg)
		} else if j, dup := ids[e.ID]; dup {
			add(p+".id", "%q is already the id of environment[%d]", e.ID, j)
		} else if taken[e.ID] {
			add(p+".id", "%q is already the id of a differential-pressure sensor", e.ID)
		} else {
			ids[e.ID] = i
		}
		switch {
		case e.Zone == "":
			add(p+".zone", "missing: name the zone the sensor watches")
		case zones != nil && !zones[e.Zone]:
			add(p+".zone", "unknown zone %q", e.Zone)
		}
		chans, known := kindChannels[e.Kind]
		if !known {
			add(p+".kind", "unknown kind %q (%s, %s, %s or %s)", e.Kind, EnvTemperatureHumidity, EnvTemperature, EnvHumidity, EnvAirVelocity)
		}
		for _, ch := range []string{ChanTemperature, ChanHumidity, ChanVelocity} {
			lim := e.Limits(ch)
			if lim == nil {
				continue
			}
			if known && !contains(chans, ch) {
				add(p+"."+ch, "a %s sensor has no %s channel (it reports %s)", e.Kind, ch, strings.Join(chans, ", "))
				continue
			}
			checkLimits(p+"."+ch, ch, lim, b, add)
		}
		if e.Delay < 0 {
			add(p+".delay", "must not be negative")
		}
		checkInterval(p+".interval", e.Interval, add)
		if checkSource(p+".source", e.Source, e.Modbus != nil, add) && known {
			validateModbusEnvironment(p+".modbus", &e, add)
		}
	}
	return errs
}

func contains(s []string, v string) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// checkLimits checks the bands of one channel.
func checkLimits(p, ch string, lim *EnvironmentLimits, b EnvironmentBounds, add func(string, string, ...any)) {
	lo, hi, unit := b.channelRange(ch)
	band := func(name string, bd *EnvironmentBand) bool {
		if bd == nil {
			return false
		}
		ok := true
		for j, v := range []*float64{bd.Low, bd.High} {
			side := [2]string{"low", "high"}[j]
			if v != nil && (!finite(*v) || *v < lo || *v > hi) {
				add(p+"."+name+"."+side, "%g %s is outside the physical range %g…%g %s", *v, unit, lo, hi, unit)
				ok = false
			}
		}
		if bd.Low == nil && bd.High == nil {
			add(p+"."+name, "empty: give low, high or both")
			return false
		}
		if ok && bd.Low != nil && bd.High != nil && *bd.Low >= *bd.High {
			add(p+"."+name+".high", "%g %s is not above low (%g %s)", *bd.High, unit, *bd.Low, unit)
			return false
		}
		return ok
	}
	alertOK, actionOK := band("alert", lim.Alert), band("action", lim.Action)
	if lim.Alert == nil && lim.Action == nil {
		add(p, "empty: give an alert band, an action band or both")
	}
	if !alertOK || !actionOK {
		return
	}
	al, ac := lim.Alert, lim.Action
	if ac.Low != nil && (al.Low == nil || *al.Low < *ac.Low) {
		add(p+".alert.low", "the alert band must lie inside the action band (action low %g %s): an alert warns before action is needed", *ac.Low, unit)
	}
	if ac.High != nil && (al.High == nil || *al.High > *ac.High) {
		add(p+".alert.high", "the alert band must lie inside the action band (action high %g %s): an alert warns before action is needed", *ac.High, unit)
	}
}

// EnvironmentSensorInfo is a validated environment sensor with its
// defaults applied. It is shared: treat it as read-only.
type EnvironmentSensorInfo struct {
	EnvironmentSensorConfig
}

// WithEnvironment returns a copy of the registry that also holds the
// environment sensors, validated against the physical bounds b (zero:
// the defaults) and against the registry's DP sensor ids; zones are not
// checked (the config loader does that through
// ValidateEnvironmentSensors). The error wraps [ErrConfig] and every
// [FieldError] found.
func (r *Registry) WithEnvironment(es []EnvironmentSensorConfig, b EnvironmentBounds) (*Registry, error) {
	b = b.orDefault()
	if err := b.check(); err != nil {
		return nil, err
	}
	taken := make(map[string]bool, len(r.sensorIDs))
	for _, id := range r.sensorIDs {
		taken[id] = true
	}
	if ferrs := ValidateEnvironmentSensors(es, nil, taken, b); len(ferrs) > 0 {
		errs := make([]error, len(ferrs))
		msgs := make([]string, len(ferrs))
		for i, fe := range ferrs {
			errs[i], msgs[i] = fe, fe.Error()
		}
		return nil, fmt.Errorf("%w: %s%w", ErrConfig, strings.Join(msgs, "; "), hidden{errors.Join(errs...)})
	}
	out := *r
	out.env = make(map[string]*EnvironmentSensorInfo, len(es))
	out.envIDs = make([]string, 0, len(es))
	out.envBounds = b
	for _, e := range es {
		e = e.withDefaults()
		out.env[e.ID] = &EnvironmentSensorInfo{EnvironmentSensorConfig: e}
		out.envIDs = append(out.envIDs, e.ID)
	}
	sort.Strings(out.envIDs)
	return &out, nil
}

// EnvironmentSensor returns the environment sensor with the given id.
func (r *Registry) EnvironmentSensor(id string) (*EnvironmentSensorInfo, bool) {
	e, ok := r.env[id]
	return e, ok
}

// EnvironmentSensors returns every environment sensor, ordered by id.
func (r *Registry) EnvironmentSensors() []*EnvironmentSensorInfo {
	out := make([]*EnvironmentSensorInfo, len(r.envIDs))
	for i, id := range r.envIDs {
		out[i] = r.env[id]
	}
	return out
}

// EnvironmentBounds returns the physical bounds samples are checked
// against.
func (r *Registry) EnvironmentBounds() EnvironmentBounds { return r.envBounds.orDefault() }

// Environment is a validated temperature, humidity or airflow-velocity
// sample ready to store. Only the channels of the sensor's kind are set.
type Environment struct {
	Sensor string
	Zone   string    // the sensor's zone, from the registry
	Time   time.Time // UTC

	TemperatureC   float64 // valid when HasTemperature
	HumidityPct    float64 // relative humidity, %; valid when HasHumidity
	VelocityMS     float64 // airflow velocity, m/s; valid when HasVelocity
	HasTemperature bool
	HasHumidity    bool
	HasVelocity    bool
}

// Value returns the value of channel ch and whether the sample has it.
func (e *Environment) Value(ch string) (float64, bool) {
	switch ch {
	case ChanTemperature:
		return e.TemperatureC, e.HasTemperature
	case ChanHumidity:
		return e.HumidityPct, e.HasHumidity
	case ChanVelocity:
		return e.VelocityMS, e.HasVelocity
	}
	return 0, false
}

// Raw turns the sample back into its submitted form.
func (e *Environment) Raw() RawEnvironment {
	raw := RawEnvironment{Sensor: e.Sensor, Time: e.Time.UTC().Format(time.RFC3339Nano)}
	if e.HasTemperature {
		v := e.TemperatureC
		raw.TemperatureC = &v
	}
	if e.HasHumidity {
		v := e.HumidityPct
		raw.HumidityPct = &v
	}
	if e.HasVelocity {
		v := e.VelocityMS
		raw.VelocityMS = &v
	}
	return raw
}

// RawEnvironment is an environment sample as sent to
// POST /api/v1/environment, before validation:
//
//	{"sensor":"th-asm","time":"2026-03-02T10:00:00Z","temperature_c":21.2,"humidity_pct":44.0}
//	{"sensor":"av-hood","time":"2026-03-02T10:00:00Z","velocity_m_s":0.45}
//
// A sample carries exactly the channels of its sensor's kind.
type RawEnvironment struct {
	Sensor       string   `json:"sensor"`
	Time         string   `json:"time"` // RFC 3339
	TemperatureC *float64 `json:"temperature_c,omitempty"`
	HumidityPct  *float64 `json:"humidity_pct,omitempty"`
	VelocityMS   *float64 `json:"velocity_m_s,omitempty"`
}

func (e *RawEnvironment) reset() { *e = RawEnvironment{} }

// value returns the raw value of channel ch (nil: not given).
func (e *RawEnvironment) value(ch string) *float64 {
	switch ch {
	case ChanTemperature:
		return e.TemperatureC
	case ChanHumidity:
		return e.HumidityPct
	default:
		return e.VelocityMS
	}
}

// channelWords names a channel for messages.
var channelWords = map[string]string{
	ChanTemperature: "the temperature in °C",
	ChanHumidity:    "the relative humidity in %",
	ChanVelocity:    "the airflow velocity in m/s",
}

// environment validates one raw environment sample into out against the
// physical bounds b.
func (v *validator) environment(i int, b EnvironmentBounds, raw *RawEnvironment, out *Environment) *InputError {
	if raw.Sensor == "" {
		return inputErrRule(i, "sensor", RuleRequired, "missing")
	}
	if ie := CheckText(i, "sensor", raw.Sensor, maxIDLen); ie != nil {
		return ie
	}
	ei, ok := v.reg.env[raw.Sensor]
	if !ok {
		if _, dp := v.reg.sensors[raw.Sensor]; dp {
			return inputErrRule(i, "sensor", RuleUnknownID, "%q is a differential-pressure sensor: send its samples to the pressure endpoint", raw.Sensor)
		}
		return inputErrRule(i, "sensor", RuleUnknownID, "unknown environment sensor %q", raw.Sensor)
	}
	t, ie := v.time(i, ei.ID, raw.Time)
	if ie != nil {
		return ie
	}
	e := Environment{Sensor: ei.ID, Zone: ei.Zone, Time: t}
	chans := ei.Channels()
	for _, ch := range []string{ChanTemperature, ChanHumidity, ChanVelocity} {
		p := raw.value(ch)
		has := contains(chans, ch)
		switch {
		case p == nil && has:
			return inputErrRule(i, ch, RuleRequired, "missing: sensor %s reports %s", ei.ID, channelWords[ch])
		case p == nil:
			continue
		case !has:
			return inputErrRule(i, ch, RuleEnvironmentChannel, "sensor %s is a %s sensor: it has no %s channel", ei.ID, ei.Kind, ch)
		}
		lo, hi, unit := b.channelRange(ch)
		if !finite(*p) || *p < lo || *p > hi {
			return inputErrRule(i, ch, RuleEnvironmentRange, "%g %s is outside the physical range %g…%g %s: check the sensor and its scaling", *p, unit, lo, hi, unit)
		}
		switch ch {
		case ChanTemperature:
			e.TemperatureC, e.HasTemperature = *p, true
		case ChanHumidity:
			e.HumidityPct, e.HasHumidity = *p, true
		case ChanVelocity:
			e.VelocityMS, e.HasVelocity = *p, true
		}
	}
	*out = e
	return nil
}

// envTolerance is how close to a band edge a value must be to count as on
// it: sensors report a few decimals, and 0.1+0.2 must not leave a band
// that ends at 0.3.
const envTolerance = 1e-9

// Judge returns the level a value of channel ch stands at against the
// sensor's bands: "" inside every band (or with no band), "alert" outside
// the alert band only, "action" outside the action band. A value exactly
// on an edge is inside.
func (c *EnvironmentSensorConfig) Judge(ch string, v float64) string {
	lim := c.Limits(ch)
	if lim == nil {
		return ""
	}
	inside := func(b *EnvironmentBand) bool {
		return b == nil || (b.Low == nil || v >= *b.Low-envTolerance*math.Max(1, math.Abs(*b.Low))) &&
			(b.High == nil || v <= *b.High+envTolerance*math.Max(1, math.Abs(*b.High)))
	}
	switch {
	case !inside(lim.Action):
		return "action"
	case !inside(lim.Alert):
		return "alert"
	}
	return ""
}

package alerts

import (
	"context"
	"fmt"
	"math"
	"sort"
	"time"
)

// KindEnvironment is the alarm of a temperature, humidity or airflow
// velocity outside its zone's band for longer than the sensor's delay.
const KindEnvironment = "environment"

// Channels of an environment sensor, named as the samples name them.
const (
	ChanTemperature = "temperature_c"
	ChanHumidity    = "humidity_pct"
	ChanVelocity    = "velocity_m_s"
)

// Defaults of an EnvironmentRule.
const (
	DefaultEnvironmentDelay    = 5 * time.Minute
	DefaultEnvironmentInterval = time.Minute
)

// EnvironmentBand is a range a value must stay within; a nil end is
// open.
type EnvironmentBand struct {
	Low, High *float64
}

// EnvironmentLimits are the bands of one channel: outside Alert an alert,
// outside Action an action. Either may be nil.
type EnvironmentLimits struct {
	Alert, Action *EnvironmentBand
}

// EnvironmentRule is what the rules know of one temperature, humidity or
// airflow-velocity sensor.
type EnvironmentRule struct {
	ID   string
	Zone string
	// Limits by channel (ChanTemperature, ChanHumidity, ChanVelocity).
	Limits map[string]EnvironmentLimits
	// Delay is how long a value may stay outside a band before the alarm
	// becomes active (default 5m), by the sensor's own clock.
	Delay time.Duration
	// Interval is the expected reporting period (default 1m); after
	// 3 × Interval of silence the sensor is stale.
	Interval time.Duration
}

// EnvironmentObservation is one committed environment sample: the values
// of the channels the sensor reports.
type EnvironmentObservation struct {
	Sensor string
	Time   time.Time
	Values map[string]float64
}

// envSpec is a compiled EnvironmentRule.
type envSpec struct {
	EnvironmentRule
	stale time.Duration
}

// envRules is the engine's part for environment sensors: their rules
// and what it last saw of each.
type envRules struct {
	specs map[string]*envSpec
	ids   []string // sorted
	st    map[string]instrState
}

var envUnits = map[string]string{ChanTemperature: "°C", ChanHumidity: "%", ChanVelocity: "m/s"}

var envWords = map[string]string{ChanTemperature: "temperature", ChanHumidity: "relative humidity", ChanVelocity: "airflow velocity"}

// compileEnvironment checks the environment rules against the zones.
func (e *Engine) compileEnvironment(rs []EnvironmentRule, zones map[string]map[string]bool, bad func(string, string, ...any)) {
	e.env = envRules{specs: map[string]*envSpec{}, st: map[string]instrState{}}
	for i, r := range rs {
		p := fmt.Sprintf("environment[%d]", i)
		if r.ID == "" {
			bad(p+".id", "missing")
			continue
		}
		if _, dup := e.env.specs[r.ID]; dup {
			bad(p+".id", "%q given twice", r.ID)
			continue
		}
		if _, ok := zones[r.Zone]; !ok {
			bad(p+".zone", "unknown zone %q", r.Zone)
		}
		for ch := range r.Limits {
			if _, ok := envUnits[ch]; !ok {
				bad(p+"."+ch, "unknown channel")
			}
		}
		if r.Delay < 0 {
			bad(p+".delay", "must not be negative")
		}
		if r.Delay == 0 {
			r.Delay = DefaultEnvironmentDelay
		}
		if r.Interval <= 0 {
			r.Interval = DefaultEnvironmentInterval
		}
		e.env.specs[r.ID] = &envSpec{EnvironmentRule: r, stale: 3 * r.Interval}
		e.env.ids = append(e.env.ids, r.ID)
	}
	sort.Strings(e.env.ids)
}

// ObserveEnvironment judges committed environment samples. Samples of
// unknown sensors are ignored, and so is one not newer than its sensor's
// newest. Bad input is refused whole and changes nothing.
func (e *Engine) ObserveEnvironment(ctx context.Context, es []EnvironmentObservation) error {
	for i, o := range es {
		if o.Time.IsZero() {
			return fmt.Errorf("%w: environment %d (%s): time: missing", ErrObservation, i, o.Sensor)
		}
		for ch, v := range o.Values {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: environment %d (%s): %s: %v is not a value", ErrObservation, i, o.Sensor, ch, v)
			}
		}
	}
	sorted := append([]EnvironmentObservation(nil), es...)
	sort.SliceStable(sorted, func(a, b int) bool { return sorted[a].Time.Before(sorted[b].Time) })
	e.mu.Lock()
	e.touched = true
	t := e.begin()
	for _, o := range sorted {
		s, ok := e.env.specs[o.Sensor]
		if !ok {
			continue
		}
		st := e.env.st[o.Sensor]
		if !o.Time.After(st.last) {
			continue
		}
		setUndo(t, e.env.st, o.Sensor, instrState{last: o.Time, live: true})
		for _, ch := range []string{ChanTemperature, ChanHumidity, ChanVelocity} {
			if v, ok := o.Values[ch]; ok {
				e.judgeEnvironment(t, s, ch, v, o.Time)
			}
		}
	}
	return e.finish(ctx, t)
}

// tickEnvironment judges the silence of environment sensors. A value
// outside its band is judged by the sensor's own clock (see elapsed): a
// sensor that falls silent while outside is caught here instead.
func (e *Engine) tickEnvironment(t *txn) {
	for _, id := range e.env.ids {
		s := e.env.specs[id]
		e.judgeStale(t, s.Zone, s.ID, "", e.env.st[id], s.stale)
	}
}

// judgeEnvironment raises, holds or ends the environment alarm of one
// channel of one sensor.
func (e *Engine) judgeEnvironment(t *txn, s *envSpec, ch string, v float64, at time.Time) {
	lim, ok := s.Limits[ch]
	if !ok {
		return
	}
	level, edge, side := "", 0.0, ""
	if outside, ed, sd := outsideBand(lim.Action, v); outside {
		level, edge, side = LevelAction, ed, sd
	} else if outside, ed, sd := outsideBand(lim.Alert, v); outside {
		level, edge, side = LevelAlert, ed, sd
	}
	unit := envUnits[ch]
	a := Alarm{Zone: s.Zone, Kind: KindEnvironment, Sensor: s.ID, Value: v, Threshold: edge, Unit: unit}
	msg := func() string {
		if level == "" {
			return fmt.Sprintf("%s %s: %s %s, back inside its bands", s.ID, envWords[ch], num(v), unit)
		}
		return fmt.Sprintf("%s %s: %s %s is %s the %s band (%s %s)", s.ID, envWords[ch], num(v), unit, side, level, num(edge), unit)
	}
	t.judge(condition{key: s.Zone + ":" + s.ID + ":" + KindEnvironment + ":" + ch, present: level != "", level: level,
		tmpl: a, since: at, at: at, delay: s.Delay, msg: msg})
}

// outsideBand tells whether v lies outside b, and then the edge it is
// beyond and on which side. A value on an edge is inside; a tolerance of
// 1e-9 relative keeps 0.1+0.2 inside a band that ends at 0.3.
func outsideBand(b *EnvironmentBand, v float64) (bool, float64, string) {
	if b == nil {
		return false, 0, ""
	}
	tol := func(x float64) float64 { return 1e-9 * math.Max(1, math.Abs(x)) }
	if b.Low != nil && v < *b.Low-tol(*b.Low) {
		return true, *b.Low, "below"
	}
	if b.High != nil && v > *b.High+tol(*b.High) {
		return true, *b.High, "above"
	}
	return false, 0, ""
}

// EnvironmentLatest is the newest sample time of each environment sensor
// the engine has judged (zero: none since the start).
func (e *Engine) EnvironmentLatest() map[string]time.Time {
	e.mu.Lock()
	defer e.mu.Unlock()
	out := make(map[string]time.Time, len(e.env.ids))
	for _, id := range e.env.ids {
		out[id] = e.env.st[id].last
	}
	return out
}

package collector

import (
	"errors"
	"fmt"
	"sort"
	"strings"

	"cleanmon/classify"
)

// CounterInfo is a validated counter with its defaults applied and its
// channels parsed, as the ingest path looks it up. It is shared: treat it,
// and the slices in it, as read-only.
type CounterInfo struct {
	Counter           // the configuration, defaults applied
	SizesUM []float64 // channel thresholds in µm, ascending
	Keys    []string  // the canonical spelling of each size ("0.3", "5"), as in JSON keys and metric labels

	keyIndex map[string]int
}

// Channel returns the index of the channel a count key names ("0.5",
// "0.5um", "0.50 µm"), and whether the counter has it.
func (c *CounterInfo) Channel(key string) (int, bool) {
	if i, ok := c.keyIndex[key]; ok {
		return i, true
	}
	v, err := classify.ParseSize(key)
	if err != nil {
		return -1, false
	}
	i, ok := c.keyIndex[classify.FormatSize(v)]
	return i, ok
}

// SensorInfo is a validated DP sensor with its defaults applied. It is
// shared: treat it as read-only.
type SensorInfo struct {
	Sensor // the configuration, defaults applied
}

// Registry is the validated, normalised set of counters and sensors that
// the hot path looks readings up in. It is immutable and safe for
// concurrent use.
type Registry struct {
	counters   map[string]*CounterInfo
	sensors    map[string]*SensorInfo
	counterIDs []string                          // sorted
	sensorIDs  []string                          // sorted
	bounds     Bounds                            // physical limits of samples (bounds.go); zero: defaults
	env        map[string]*EnvironmentSensorInfo // set by WithEnvironment
	envIDs     []string                          // sorted
	envBounds  EnvironmentBounds                 // zero: the defaults
}

// NewRegistry validates the counters and sensors (without checking zone
// names, which is the config loader's job through ValidateCounters and
// ValidateSensors) and builds the lookup. The error wraps [ErrConfig] and
// every [FieldError] found.
func NewRegistry(cs []Counter, ss []Sensor) (*Registry, error) {
	ferrs := append(ValidateCounters(cs, nil), ValidateSensors(ss, nil)...)
	if len(ferrs) > 0 {
		errs := make([]error, len(ferrs))
		msgs := make([]string, len(ferrs))
		for i, fe := range ferrs {
			errs[i], msgs[i] = fe, fe.Error()
		}
		return nil, fmt.Errorf("%w: %s%w", ErrConfig, strings.Join(msgs, "; "), hidden{errors.Join(errs...)})
	}
	r := &Registry{
		counters: make(map[string]*CounterInfo, len(cs)),
		sensors:  make(map[string]*SensorInfo, len(ss)),
	}
	for _, c := range cs {
		c = c.withDefaults()
		ci := &CounterInfo{Counter: c, keyIndex: make(map[string]int, 2*len(c.Sizes))}
		for i, s := range c.Sizes {
			v, _ := classify.ParseSize(s) // validated above
			ci.SizesUM = append(ci.SizesUM, v)
			k := classify.FormatSize(v)
			ci.Keys = append(ci.Keys, k)
			ci.keyIndex[k] = i
			ci.keyIndex[k+"um"] = i // the other common spelling, spared a parse
		}
		r.counters[c.ID] = ci
		r.counterIDs = append(r.counterIDs, c.ID)
	}
	for _, s := range ss {
		s = s.withDefaults()
		r.sensors[s.ID] = &SensorInfo{Sensor: s}
		r.sensorIDs = append(r.sensorIDs, s.ID)
	}
	sort.Strings(r.counterIDs)
	sort.Strings(r.sensorIDs)
	return r, nil
}

// hidden carries wrapped errors for errors.Is/As without adding to the
// message, which already lists them.
type hidden struct{ err error }

func (h hidden) Error() string { return "" }
func (h hidden) Unwrap() error { return h.err }

// Counter returns the counter with the given id.
func (r *Registry) Counter(id string) (*CounterInfo, bool) {
	c, ok := r.counters[id]
	return c, ok
}

// Sensor returns the sensor with the given id.
func (r *Registry) Sensor(id string) (*SensorInfo, bool) {
	s, ok := r.sensors[id]
	return s, ok
}

// Counters returns every counter, ordered by id.
func (r *Registry) Counters() []*CounterInfo {
	out := make([]*CounterInfo, len(r.counterIDs))
	for i, id := range r.counterIDs {
		out[i] = r.counters[id]
	}
	return out
}

// Sensors returns every sensor, ordered by id.
func (r *Registry) Sensors() []*SensorInfo {
	out := make([]*SensorInfo, len(r.sensorIDs))
	for i, id := range r.sensorIDs {
		out[i] = r.sensors[id]
	}
	return out
}

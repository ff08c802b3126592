package collector

import (
	"fmt"
	"math"
	"time"
)

// Defaults of Bounds.
const (
	// DefaultVolumeWindow: a counter's flow stays within ±5 % of nominal
	// (ISO 21501-4, from memory), so the volume it reports for a known
	// sampling time does too.
	DefaultVolumeWindow = 0.05
	// DefaultConcentrationMargin: counts beyond the stated maximum are
	// kept but flagged untrusted (coincidence loss); beyond ten times it
	// they cannot be a measurement (common practice, no source).
	DefaultConcentrationMargin = 10
	// DefaultUnknownMaxPerM3 stands in for a counter whose maximum is not
	// configured: above the stated limit of optical counters in use, about
	// 1e6–1e9 particles/m³ (from memory).
	DefaultUnknownMaxPerM3 = 1e10
	// DefaultMaxAbsPa bounds a DP sample: room pressure cascades are tens
	// of pascals; ±5 000 Pa is beyond any cleanroom (common practice, no
	// source).
	DefaultMaxAbsPa = 5000
	// DefaultMaxFlowFactor: a pump reporting more than twice its nominal
	// flow is not measuring (common practice, no source). Flow outside
	// ±5 % but inside this is stored and alarmed, not refused.
	DefaultMaxFlowFactor = 2
)

// DefaultOldest is the earliest sample time taken when Bounds.Oldest is
// zero: no stored record of this program predates it.
var DefaultOldest = time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC)

// Bounds are the physical limits every sample is checked against on top
// of its form. Zero fields take the defaults; the per-instrument maps
// override for one counter or sensor id.
type Bounds struct {
	// VolumeWindow is the relative window around flow × sampling time in
	// which volume_l must lie when the counter's nominal flow is used
	// (default 0.05).
	VolumeWindow float64
	// ConcentrationMargin multiplies the counter's stated maximum (or
	// UnknownMaxPerM3) to give the highest concentration accepted
	// (default 10).
	ConcentrationMargin float64
	// UnknownMaxPerM3 is the maximum assumed for a counter without one
	// (default 1e10 particles/m³).
	UnknownMaxPerM3 float64
	// MaxFlowFactor × nominal flow is the highest reported flow accepted
	// (default 2).
	MaxFlowFactor float64
	// MaxAbsPa is the largest |DP| accepted (default 5 000 Pa);
	// SensorMaxAbsPa overrides it per sensor id.
	MaxAbsPa       float64
	SensorMaxAbsPa map[string]float64
	// ClockSkew overrides IngestOptions.MaxFuture (how far ahead of the
	// daemon's clock a sample time may be) per counter or sensor id.
	ClockSkew map[string]time.Duration
	// Oldest is the earliest sample time accepted (default DefaultOldest).
	Oldest time.Time
}

// withDefaults fills zero fields.
func (b Bounds) withDefaults() Bounds {
	if b.VolumeWindow == 0 {
		b.VolumeWindow = DefaultVolumeWindow
	}
	if b.ConcentrationMargin == 0 {
		b.ConcentrationMargin = DefaultConcentrationMargin
	}
	if b.UnknownMaxPerM3 == 0 {
		b.UnknownMaxPerM3 = DefaultUnknownMaxPerM3
	}
	if b.MaxFlowFactor == 0 {
		b.MaxFlowFactor = DefaultMaxFlowFactor
	}
	if b.MaxAbsPa == 0 {
		b.MaxAbsPa = DefaultMaxAbsPa
	}
	if b.Oldest.IsZero() {
		b.Oldest = DefaultOldest
	}
	return b
}

// check refuses bounds that would let absurd values through.
func (b Bounds) check() error {
	bad := func(name string, v float64) error {
		return fmt.Errorf("%w: bounds: %s %g must be a finite number > 0", ErrConfig, name, v)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"volume window", b.VolumeWindow}, {"concentration margin", b.ConcentrationMargin},
		{"unknown maximum per m³", b.UnknownMaxPerM3}, {"flow factor", b.MaxFlowFactor}, {"maximum |DP|", b.MaxAbsPa},
	} {
		if !(f.v > 0) || math.IsInf(f.v, 0) {
			return bad(f.name, f.v)
		}
	}
	if b.VolumeWindow >= 1 {
		return fmt.Errorf("%w: bounds: volume window %g must be below 1 (100 %%)", ErrConfig, b.VolumeWindow)
	}
	for id, pa := range b.SensorMaxAbsPa {
		if !(pa > 0) || math.IsInf(pa, 0) {
			return bad("maximum |DP| of sensor "+id, pa)
		}
	}
	for id, d := range b.ClockSkew {
		if d < 0 {
			return fmt.Errorf("%w: bounds: clock skew %s of %s is negative", ErrConfig, d, id)
		}
	}
	return nil
}

// WithBounds returns a copy of the registry whose ingest checks samples
// against b (zero fields: the defaults). A registry made by NewRegistry
// uses the defaults.
func (r *Registry) WithBounds(b Bounds) (*Registry, error) {
	b = b.withDefaults()
	if err := b.check(); err != nil {
		return nil, err
	}
	out := *r
	out.bounds = b
	return &out, nil
}

// Bounds returns the bounds the registry's ingest applies, defaults
// filled in.
func (r *Registry) Bounds() Bounds { return r.bounds.withDefaults() }

package site

import (
	"fmt"
	"math"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"github.com/prometheus/common/model"

	"cleanmon/collector"
)

// Defaults of the audit section.
const (
	DefaultCheckpointEvery = 15 * time.Minute
	DefaultFullCheckEvery  = 24 * time.Hour
)

// AuditConfig is the `audit:` section: the key the record is signed with,
// the keys it may have been signed with before, and how often the head of
// the chain is published and the whole store checked.
type AuditConfig struct {
	// SigningKeyFile is the Ed25519 private key (`cleanmon keygen`),
	// readable by the daemon only and kept outside the data directory.
	// Empty: the record is not signed, and the daemon warns at start.
	SigningKeyFile string `yaml:"signing_key_file"`
	// PublicKeyFiles are the public keys of earlier signing keys, so that
	// the checks still verify entries signed before a rotation.
	PublicKeyFiles []string `yaml:"public_key_files"`
	// CheckpointEvery is how often the chain head is published to the log
	// and to every notifier (default DefaultCheckpointEvery).
	CheckpointEvery model.Duration `yaml:"checkpoint_every"`
	// FullCheckEvery is how often the whole store is checked in the
	// background (default DefaultFullCheckEvery); the first runs at start.
	FullCheckEvery model.Duration `yaml:"full_check_every"`
}

// CheckpointPeriod is the configured checkpoint period or its default.
func (a AuditConfig) CheckpointPeriod() time.Duration {
	return cmpDuration(a.CheckpointEvery, DefaultCheckpointEvery)
}

// FullCheckPeriod is the configured full-check period or its default.
func (a AuditConfig) FullCheckPeriod() time.Duration {
	return cmpDuration(a.FullCheckEvery, DefaultFullCheckEvery)
}

func cmpDuration(d model.Duration, def time.Duration) time.Duration {
	if d > 0 {
		return time.Duration(d)
	}
	return def
}

// IngestConfig is the `ingest:` section: the physical bounds every sample
// is checked against, where the defaults do not suit the site.
type IngestConfig struct {
	// ClockSkew is how far ahead of the daemon's clock a sample time may
	// be (default 5m); ClockSkewBy overrides it per counter or sensor id.
	ClockSkew   model.Duration            `yaml:"clock_skew"`
	ClockSkewBy map[string]model.Duration `yaml:"clock_skew_by_instrument"`
	// MaxAbsPa is the largest |DP| accepted (default 5000 Pa); MaxAbsPaBy
	// overrides it per sensor id.
	MaxAbsPa   float64            `yaml:"max_abs_pa"`
	MaxAbsPaBy map[string]float64 `yaml:"max_abs_pa_by_sensor"`
	// VolumeWindow is the relative window around flow × sampling time in
	// which volume_l must lie (default 0.05, ±5 %).
	VolumeWindow float64 `yaml:"volume_window"`
	// ConcentrationMargin multiplies a counter's stated maximum to give
	// the highest concentration accepted (default 10).
	ConcentrationMargin float64 `yaml:"concentration_margin"`
}

// Bounds are the ingest bounds of the configuration, for
// collector.Registry.WithBounds. A clock skew given for the whole site
// applies to every instrument that has none of its own.
func (c *Config) Bounds() collector.Bounds {
	in := c.Ingest
	b := collector.Bounds{VolumeWindow: in.VolumeWindow, ConcentrationMargin: in.ConcentrationMargin, MaxAbsPa: in.MaxAbsPa}
	if len(in.MaxAbsPaBy) > 0 {
		b.SensorMaxAbsPa = map[string]float64{}
		for k, v := range in.MaxAbsPaBy {
			b.SensorMaxAbsPa[k] = v
		}
	}
	if in.ClockSkew > 0 || len(in.ClockSkewBy) > 0 {
		b.ClockSkew = map[string]time.Duration{}
		if in.ClockSkew > 0 {
			for _, k := range c.Counters {
				b.ClockSkew[k.ID] = time.Duration(in.ClockSkew)
			}
			for _, s := range c.PressureSensors {
				b.ClockSkew[s.ID] = time.Duration(in.ClockSkew)
			}
		}
		for k, v := range in.ClockSkewBy {
			b.ClockSkew[k] = time.Duration(v)
		}
	}
	return b
}

// checkTrust checks the audit and ingest sections.
func (d *nodeDecoder) checkTrust(c *Config) {
	a := c.Audit
	if a.SigningKeyFile != "" && c.DataDir != "" && within(c.DataDir, a.SigningKeyFile) {
		d.add("audit.signing_key_file", "%s lies in the data directory %s: whoever can write the record could then sign it; keep the key elsewhere", a.SigningKeyFile, c.DataDir)
	}
	for i, f := range a.PublicKeyFiles {
		if strings.TrimSpace(f) == "" {
			d.add(fmt.Sprintf("audit.public_key_files[%d]", i), "empty path")
		}
	}
	if a.CheckpointEvery < 0 || (a.CheckpointEvery > 0 && time.Duration(a.CheckpointEvery) < time.Second) {
		d.add("audit.checkpoint_every", "%s: want at least 1s", time.Duration(a.CheckpointEvery))
	}
	if a.FullCheckEvery < 0 || (a.FullCheckEvery > 0 && time.Duration(a.FullCheckEvery) < time.Minute) {
		d.add("audit.full_check_every", "%s: want at least 1m", time.Duration(a.FullCheckEvery))
	}
	in := c.Ingest
	if in.ClockSkew < 0 {
		d.add("ingest.clock_skew", "%s: must not be negative", time.Duration(in.ClockSkew))
	}
	known := map[string]bool{}
	sensors := map[string]bool{}
	for _, k := range c.Counters {
		known[k.ID] = true
	}
	for _, s := range c.PressureSensors {
		known[s.ID], sensors[s.ID] = true, true
	}
	for _, id := range sortedKeys(in.ClockSkewBy) {
		p := "ingest.clock_skew_by_instrument." + id
		if !known[id] {
			d.add(p, "no counter or pressure sensor %q is configured", id)
		} else if in.ClockSkewBy[id] <= 0 {
			d.add(p, "%s: must be positive", time.Duration(in.ClockSkewBy[id]))
		}
	}
	if !(in.MaxAbsPa >= 0) || math.IsInf(in.MaxAbsPa, 0) {
		d.add("ingest.max_abs_pa", "%v: want a positive number of pascals", in.MaxAbsPa)
	}
	for _, id := range sortedKeys(in.MaxAbsPaBy) {
		p := "ingest.max_abs_pa_by_sensor." + id
		if v := in.MaxAbsPaBy[id]; !sensors[id] {
			d.add(p, "no pressure sensor %q is configured", id)
		} else if !(v > 0) || math.IsInf(v, 0) {
			d.add(p, "%v: want a positive number of pascals", v)
		}
	}
	if w := in.VolumeWindow; w != 0 && !(w > 0 && w < 1) {
		d.add("ingest.volume_window", "%v: want a fraction between 0 and 1 (0.05 is ±5 %%)", w)
	}
	if m := in.ConcentrationMargin; m != 0 && !(m >= 1) || math.IsInf(m, 0) {
		d.add("ingest.concentration_margin", "%v: want a factor of at least 1", m)
	}
}

// within reports whether path lies in dir.
func within(dir, path string) bool {
	rel, err := filepath.Rel(filepath.Clean(dir), filepath.Clean(path))
	return err == nil && rel != ".." && !strings.HasPrefix(rel, ".."+string(filepath.Separator))
}

func sortedKeys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

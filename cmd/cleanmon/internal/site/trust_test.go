package site

import (
	"strings"
	"testing"
	"time"
)

// The audit and ingest sections: each problem at its key, and the bounds
// handed to the collector as configured.
func TestTrustSections(t *testing.T) {
	for _, c := range []struct {
		name, yaml, want string
	}{
		{"key inside the data directory", "data_dir: /var/lib/cleanmon\naudit: {signing_key_file: /var/lib/cleanmon/keys/a.key}\n", "site.yaml:17:"},
		{"checkpoints too often", "audit: {checkpoint_every: 10ms}\n", "audit.checkpoint_every: 10ms: want at least 1s"},
		{"full check too often", "audit: {full_check_every: 30s}\n", "audit.full_check_every"},
		{"skew for an unknown instrument", "ingest: {clock_skew_by_instrument: {pc-x: 30s}}\n", "ingest.clock_skew_by_instrument.pc-x: no counter or pressure sensor"},
		{"DP bound for a counter", "ingest: {max_abs_pa_by_sensor: {pc-h: 100}}\n", "ingest.max_abs_pa_by_sensor.pc-h: no pressure sensor"},
		{"volume window of 150 %", "ingest: {volume_window: 1.5}\n", "ingest.volume_window: 1.5: want a fraction"},
		{"margin below one", "ingest: {concentration_margin: 0.5}\n", "ingest.concentration_margin: 0.5"},
		{"unknown key", "audit: {signing_key: x}\n", "audit.signing_key"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Load("site.yaml", []byte(baseSite+c.yaml))
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Errorf("got %v, want a problem containing %q", err, c.want)
			}
		})
	}
	cfg, err := Load("site.yaml", []byte(baseSite+"ingest: {clock_skew: 2m, clock_skew_by_instrument: {dp-h: 20s}, max_abs_pa: 800, max_abs_pa_by_sensor: {dp-h: 100}, volume_window: 0.1}\naudit: {checkpoint_every: 1m}\n"))
	if err != nil {
		t.Fatal(err)
	}
	b := cfg.Bounds()
	if b.ClockSkew["pc-h"] != 2*time.Minute || b.ClockSkew["dp-h"] != 20*time.Second || b.MaxAbsPa != 800 || b.SensorMaxAbsPa["dp-h"] != 100 || b.VolumeWindow != 0.1 {
		t.Errorf("bounds %+v", b)
	}
	if cfg.Audit.CheckpointPeriod() != time.Minute || cfg.Audit.FullCheckPeriod() != DefaultFullCheckEvery {
		t.Errorf("periods %s %s", cfg.Audit.CheckpointPeriod(), cfg.Audit.FullCheckPeriod())
	}
}

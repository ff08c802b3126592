package alerts

import "fmt"

// AlarmsConfig is the `alarms:` section of the site configuration: the
// tunables of the rules that are not per zone.
type AlarmsConfig struct {
	// Consecutive is N of the consecutive rule: N samples in a row above
	// the alert level raise an action alarm (default 3).
	Consecutive int `yaml:"consecutive"`
	// TrendRun is how many samples in a row, each higher than the one
	// before, raise a trend alert (default 6).
	TrendRun int `yaml:"trend_run"`
	// CountRuleCounts and CountRuleSamples are the count rule at ≥5 µm in
	// grade A, and B at rest: that many particles within that many
	// samples raise an action (defaults 2 within 3; see rules_counts.go).
	CountRuleCounts  int `yaml:"count_rule_counts"`
	CountRuleSamples int `yaml:"count_rule_samples"`
	// TrendBaseline is how many earlier samples make the baseline
	// (default 100).
	TrendBaseline int `yaml:"trend_baseline"`
	// Latch overrides, per alarm kind, whether its alarms stay until
	// acknowledged; a kind left out latches at the action level.
	Latch map[string]bool `yaml:"latch"`
}

var knownKinds = map[string]bool{
	KindExcursion: true, KindConsecutive: true, KindOutOfClass: true, KindPressureLow: true,
	KindPressureReversal: true, KindStale: true, KindInstrument: true, KindTrend: true, KindEnvironment: true,
}

// ValidateAlarms checks the section; paths start with "alarms".
func ValidateAlarms(c AlarmsConfig) []FieldError {
	var errs []FieldError
	if c.Consecutive != 0 && c.Consecutive < 2 {
		errs = append(errs, FieldError{"alarms.consecutive", fmt.Sprintf("%d: at least 2 (one sample is an excursion)", c.Consecutive)})
	}
	if c.TrendRun != 0 && c.TrendRun < 2 {
		errs = append(errs, FieldError{"alarms.trend_run", fmt.Sprintf("%d: at least 2", c.TrendRun)})
	}
	if c.TrendBaseline != 0 && c.TrendBaseline < 10 {
		errs = append(errs, FieldError{"alarms.trend_baseline", fmt.Sprintf("%d: at least 10 samples", c.TrendBaseline)})
	}
	if c.CountRuleCounts < 0 {
		errs = append(errs, FieldError{"alarms.count_rule_counts", fmt.Sprintf("%d: at least 1", c.CountRuleCounts)})
	}
	if c.CountRuleSamples < 0 {
		errs = append(errs, FieldError{"alarms.count_rule_samples", fmt.Sprintf("%d: at least 1", c.CountRuleSamples)})
	}
	for k := range c.Latch {
		if !knownKinds[k] {
			errs = append(errs, FieldError{"alarms.latch." + k, "unknown alarm kind"})
		}
	}
	return errs
}

package alerts

import (
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// lognormalHistory is a skewed background like a room's 0.5 µm
// concentrations: log-normal around median (common practice, no source).
func lognormalHistory(n int, median, sigma float64, seed uint64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 3))
	out := make([]float64, n)
	for i := range out {
		out[i] = median * math.Exp(sigma*rng.NormFloat64())
	}
	return out
}

func TestSuggestLevelsPercentilesAgainstGonum(t *testing.T) {
	// ISO 7 at 0.5 µm: 352 000 /m³, ISO 14644-1:2015 Table 1.
	const limit = 352000
	for _, n := range []int{100, 250, 1000, 1001} {
		hist := lognormalHistory(n, 20000, 0.6, uint64(n))
		adv := SuggestLevels(hist, limit)
		sorted := slices.Clone(hist)
		slices.Sort(sorted)
		p95 := stat.Quantile(0.95, stat.Empirical, sorted, nil)
		p99 := stat.Quantile(0.99, stat.Empirical, sorted, nil)
		if adv.Method != LevelsByPercentile || adv.Samples != n || adv.Alert == nil || adv.Action == nil {
			t.Fatalf("n %d: %+v", n, adv)
		}
		if *adv.Alert != p95 || *adv.Action != p99 {
			t.Errorf("n %d: alert %v action %v, gonum empirical P95 %v P99 %v", n, *adv.Alert, *adv.Action, p95, p99)
		}
		if math.Abs(adv.MeanPerM3-stat.Mean(hist, nil)) > 1e-6 {
			t.Errorf("n %d: mean %v, gonum %v", n, adv.MeanPerM3, stat.Mean(hist, nil))
		}
		if len(adv.Caveats) != 0 {
			t.Errorf("n %d: caveats %q for a plain history", n, adv.Caveats)
		}
	}
}

func TestSuggestLevelsMeanSDAgainstGonum(t *testing.T) {
	hist := lognormalHistory(400, 50000, 0.2, 5)
	adv := SuggestLevels(hist, 352000, LevelsByMeanSD)
	mean, sd := stat.MeanStdDev(hist, nil)
	if adv.Method != LevelsByMeanSD || math.Abs(*adv.Alert-(mean+2*sd)) > 1e-6 || math.Abs(*adv.Action-(mean+3*sd)) > 1e-6 {
		t.Fatalf("%+v, want alert %v action %v", adv, mean+2*sd, mean+3*sd)
	}
}

func TestSuggestLevelsRules(t *testing.T) {
	cases := []struct {
		name    string
		history []float64
		limit   float64
		method  []LevelMethod
		alert   *float64 // nil: want no alert level
		action  *float64
		caveat  string // a caveat that must be present
		noAlert bool   // want no alert level
	}{
		{name: "never above the limit", history: lognormalHistory(200, 300000, 0.5, 1), limit: 352000,
			alert: ptrf(352000), action: ptrf(352000), caveat: "capped at the limit"},
		{name: "mean above the limit is said", history: []float64{400000, 500000, 450000}, limit: 352000,
			alert: ptrf(352000), action: ptrf(352000), caveat: "above the limit"},
		{name: "few samples", history: []float64{1, 2, 3, 4, 5, 6, 7, 8, 9, 10}, limit: 352000,
			// Empirical P95 of 10 values: the smallest with ≥ 9.5 at or
			// below it, the 10th; P99 likewise the 10th.
			alert: ptrf(10), action: ptrf(10), caveat: "only 10 samples"},
		{name: "never below the centre", history: append(make([]float64, 96), 1e5, 1e5, 1e5, 1e5), limit: 352000,
			// 96 zeros and 4 × 100 000: P95 = 0 (95 values ≤ 0) is below the
			// mean of 4 000, so the alert level is the mean; P99 = 100 000.
			alert: ptrf(4000), action: ptrf(1e5), caveat: "raised to the history's mean"},
		{name: "no particles", history: make([]float64, 150), limit: 29,
			alert: ptrf(0), action: ptrf(29), caveat: "no particles in the history"},
		{name: "no history", history: nil, limit: 2930, noAlert: true, action: ptrf(2930), caveat: "no history"},
		{name: "no limit", history: lognormalHistory(200, 1000, 0.3, 2), limit: 0, caveat: "not capped"},
		{name: "bad values named", history: append(lognormalHistory(120, 1000, 0.3, 4), -5, math.NaN()), limit: 352000,
			caveat: "[120] -5, [121] NaN"},
		{name: "unknown method", history: lognormalHistory(120, 1000, 0.3, 4), limit: 352000, method: []LevelMethod{"median"},
			caveat: `unknown method "median"`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			adv := SuggestLevels(c.history, c.limit, c.method...)
			if c.alert != nil && (adv.Alert == nil || math.Abs(*adv.Alert-*c.alert) > 1e-9) {
				t.Errorf("alert %v, want %v", deref(adv.Alert), *c.alert)
			}
			if c.noAlert && adv.Alert != nil {
				t.Errorf("alert %v, want none", *adv.Alert)
			}
			if c.action != nil && (adv.Action == nil || math.Abs(*adv.Action-*c.action) > 1e-9) {
				t.Errorf("action %v, want %v", deref(adv.Action), *c.action)
			}
			if c.caveat != "" && !strings.Contains(strings.Join(adv.Caveats, "|"), c.caveat) {
				t.Errorf("caveats %q lack %q", adv.Caveats, c.caveat)
			}
			// Whatever the history: never above a limit, alert ≤ action,
			// and a result a zone configuration accepts.
			if c.limit > 0 {
				for _, v := range []*float64{adv.Alert, adv.Action} {
					if v != nil && *v > c.limit {
						t.Errorf("level %v above the limit %v", *v, c.limit)
					}
				}
			}
			if adv.Alert != nil && adv.Action != nil && *adv.Alert > *adv.Action {
				t.Errorf("alert %v above action %v", *adv.Alert, *adv.Action)
			}
			if adv.Action != nil && c.limit > 0 {
				z := engineZones()[0]
				z.Levels = map[string]Levels{"0.5": adv.Levels()}
				z.Class = ptrf(9) // a limit above any advice here: the levels alone are checked
				if errs := ValidateZones([]ZoneConfig{z}); len(errs) != 0 {
					t.Errorf("advice refused by the zone configuration: %v", errs)
				}
			}
		})
	}
}

func deref(p *float64) any {
	if p == nil {
		return nil
	}
	return *p
}

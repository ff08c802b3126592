package collector

import (
	"math"
	"strings"
	"time"

	"cleanmon/classify"
)

// validator checks raw elements against the registry at one instant; one is
// made per request so that every element is judged by the same clock.
type validator struct {
	reg    *Registry
	b      Bounds
	now    time.Time
	oldest time.Time     // the later of the retention limit and Bounds.Oldest
	retain bool          // oldest comes from the retention period
	skew   time.Duration // default allowance for a sender's clock ahead of ours
	volTol float64       // < 0: no flow × time consistency check
}

func (in *Ingest) validator() validator {
	now := in.opt.Now().UTC()
	b := in.reg.bounds.withDefaults()
	v := validator{reg: in.reg, b: b, now: now, oldest: b.Oldest, skew: in.opt.MaxFuture, volTol: in.opt.VolumeTolerance}
	if in.opt.Retention > 0 {
		if r := now.Add(-in.opt.Retention); r.After(v.oldest) {
			v.oldest, v.retain = r, true
		}
	}
	return v
}

// time parses and bounds-checks the timestamp of instrument id.
func (v *validator) time(i int, id, s string) (time.Time, *InputError) {
	if s == "" {
		return time.Time{}, inputErrRule(i, "time", RuleRequired, "missing: give the sample time in RFC 3339, e.g. 2026-03-02T10:00:00Z")
	}
	if ie := CheckText(i, "time", s, 64); ie != nil {
		return time.Time{}, ie
	}
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, inputErrRule(i, "time", RuleTimeFormat, "%q is not an RFC 3339 time with a zone, e.g. 2026-03-02T10:00:00Z", s)
	}
	t = t.UTC()
	if t.Before(v.oldest) {
		if v.retain {
			return time.Time{}, inputErrRule(i, "time", RuleTimeRetention, "%s is older than the retention period (oldest accepted %s)", s, v.oldest.Format(time.RFC3339))
		}
		return time.Time{}, inputErrRule(i, "time", RuleTimeOldest, "%s is before %s, the oldest sample time accepted: check the sender's clock", s, v.oldest.Format(time.RFC3339))
	}
	skew := v.skew
	if d, ok := v.b.ClockSkew[id]; ok {
		skew = d
	}
	if newest := v.now.Add(skew); t.After(newest) {
		return time.Time{}, inputErrRule(i, "time", RuleTimeFuture, "%s is in the future (latest accepted %s, %s of clock skew allowed): check the sender's clock", s, newest.Format(time.RFC3339), skew)
	}
	return t, nil
}

func finite(f float64) bool { return !math.IsNaN(f) && !math.IsInf(f, 0) }

// reading validates and normalises one raw reading into out.
func (v *validator) reading(i int, raw *RawReading, out *Reading) *InputError {
	ci, ie := v.counter(i, raw)
	if ie != nil {
		return ie
	}
	t, ie := v.time(i, ci.ID, raw.Time)
	if ie != nil {
		return ie
	}
	mode, status, ie := modeStatus(i, ci, raw)
	if ie != nil {
		return ie
	}
	if ie := v.volume(i, ci, raw); ie != nil {
		return ie
	}
	vol := *raw.VolumeL
	counts, ie := channelCounts(i, ci, raw.Counts)
	if ie != nil {
		return ie
	}
	cum := counts
	if mode == ModeDifferential {
		cum = classify.CumulativeFromDifferential(counts)
	} else if ch, bad := classify.CheckCumulative(counts); bad {
		return inputErrRule(i, "counts."+ci.Keys[ch], RuleCumulativeOrder, "cumulative count %d at ≥%s µm is more than the %d at ≥%s µm: a larger size cannot see more particles (differential counts need \"mode\":\"differential\")",
			counts[ch], ci.Keys[ch], counts[ch-1], ci.Keys[ch-1])
	}
	perM3 := make([]float64, len(cum))
	for ch, c := range cum {
		perM3[ch] = classify.PerCubicMetre(c, vol)
	}
	if ie := v.concentration(i, ci, perM3[0]); ie != nil {
		return ie
	}
	*out = Reading{
		Counter:       ci.ID,
		Zone:          ci.Zone,
		Location:      ci.Location,
		Time:          t,
		VolumeL:       vol,
		FlowLPM:       raw.FlowLPM,
		SampleSeconds: raw.SampleS,
		Status:        status,
		Differential:  mode == ModeDifferential,
		Sizes:         ci.SizesUM,
		Counts:        counts,
		PerM3:         perM3,
		OverRange:     ci.MaxPerM3 > 0 && perM3[0] >= ci.MaxPerM3,
	}
	return nil
}

// counter looks the reading's counter up.
func (v *validator) counter(i int, raw *RawReading) (*CounterInfo, *InputError) {
	if raw.Counter == "" {
		return nil, inputErrRule(i, "counter", RuleRequired, "missing")
	}
	if ie := CheckText(i, "counter", raw.Counter, maxIDLen); ie != nil {
		return nil, ie
	}
	ci, ok := v.reg.counters[raw.Counter]
	if !ok {
		return nil, inputErrRule(i, "counter", RuleUnknownID, "unknown counter %q", raw.Counter)
	}
	return ci, nil
}

// modeStatus reads the optional mode and status.
func modeStatus(i int, ci *CounterInfo, raw *RawReading) (Mode, string, *InputError) {
	mode := ci.Mode
	switch Mode(raw.Mode) {
	case "":
	case ModeCumulative, ModeDifferential:
		mode = Mode(raw.Mode)
	default:
		if ie := CheckText(i, "mode", raw.Mode, 32); ie != nil {
			return "", "", ie
		}
		return "", "", inputErrRule(i, "mode", RuleEnum, "unknown mode %q (cumulative or differential)", raw.Mode)
	}
	status := StatusOK
	switch raw.Status {
	case "":
	case StatusOK, StatusWarning, StatusFault:
		status = raw.Status
	default:
		if ie := CheckText(i, "status", raw.Status, 32); ie != nil {
			return "", "", ie
		}
		return "", "", inputErrRule(i, "status", RuleEnum, "unknown status %q (ok, warning or fault)", raw.Status)
	}
	return mode, status, nil
}

// volume checks volume_l, flow_lpm and sample_s against each other and
// against what the counter can physically draw: its flow (reported, or
// nominal) over its sampling time (reported, or at most its period).
func (v *validator) volume(i int, ci *CounterInfo, raw *RawReading) *InputError {
	if raw.VolumeL == nil {
		return inputErrRule(i, "volume_l", RuleRequired, "missing: give the sampled volume in litres")
	}
	vol, flow, secs := *raw.VolumeL, raw.FlowLPM, raw.SampleS
	if !finite(vol) || vol <= 0 {
		return inputErrRule(i, "volume_l", RuleVolumePositive, "%g L: the sampled volume must be a finite number of litres > 0", vol)
	}
	maxFlow := ci.FlowLPM * v.b.MaxFlowFactor
	if !finite(flow) || flow < 0 || flow > maxFlow {
		return inputErrRule(i, "flow_lpm", RuleFlowRange, "%g L/min: the flow must be ≥ 0 and at most %g × the nominal %g L/min", flow, v.b.MaxFlowFactor, ci.FlowLPM)
	}
	period := time.Duration(ci.Interval).Seconds()
	w := v.b.VolumeWindow
	// Built only when it is the answer: formatting it for every reading
	// was an eighth of the ingest's CPU.
	sampleErr := func() *InputError {
		return inputErrRule(i, "sample_s", RuleSampleTime, "%g s: the sampling time must be ≥ 0 and not longer than the counter's %s period", secs, ci.Interval)
	}
	if !finite(secs) || secs < 0 {
		return sampleErr()
	}
	// The sender's own figures first: a volume that disagrees with them
	// is the clearer message.
	if flow > 0 && secs > 0 && v.volTol >= 0 {
		if want := flow * secs / 60; math.Abs(vol-want) > v.volTol*want {
			return inputErrRule(i, "volume_l", RuleVolumeConsistent, "%g L is inconsistent with flow_lpm × sample_s / 60 = %.4g L (tolerance %g %%)", vol, want, v.volTol*100)
		}
	}
	if secs > period*(1+w) {
		return sampleErr()
	}
	switch {
	case flow > 0 && secs > 0 && v.volTol >= 0:
		// checked above
	case secs > 0:
		f := flow
		if f == 0 {
			f = ci.FlowLPM
		} else {
			f = maxFlow // the consistency check is off: only the pump's limit holds
		}
		lo, hi := f*secs/60*(1-w), f*secs/60*(1+w)
		if flow > 0 {
			lo = 0
		}
		if vol < lo || vol > hi {
			return inputErrRule(i, "volume_l", RuleVolumeDrawable, "%g L is outside %.4g–%.4g L, what %g L/min draws in %g s (±%g %%)", vol, lo, hi, f, secs, w*100)
		}
	default:
		f := flow
		if f == 0 {
			f = ci.FlowLPM
		}
		lo, hi := f*MinInterval.Seconds()/60*(1-w), f*period/60*(1+w)
		if vol < lo || vol > hi {
			return inputErrRule(i, "volume_l", RuleVolumeDrawable, "%g L is outside %.4g–%.4g L, what %g L/min draws in %s to %s (±%g %%)", vol, lo, hi, f, MinInterval, ci.Interval, w*100)
		}
	}
	return nil
}

// concentration bounds the largest (smallest-size) concentration.
func (v *validator) concentration(i int, ci *CounterInfo, perM3 float64) *InputError {
	limit := ci.MaxPerM3
	if limit <= 0 {
		limit = v.b.UnknownMaxPerM3
	}
	limit *= v.b.ConcentrationMargin
	if !finite(perM3) || perM3 > limit {
		return inputErrRule(i, "counts."+ci.Keys[0], RuleConcentrationMax, "%.4g particles/m³ at ≥%s µm is beyond %.4g, %g × the counter's maximum: not a measurement", perM3, ci.Keys[0], limit, v.b.ConcentrationMargin)
	}
	return nil
}

// channelCounts maps the count keys onto the counter's channels.
func channelCounts(i int, ci *CounterInfo, raw map[string]Count) ([]uint64, *InputError) {
	n := len(ci.SizesUM)
	if len(raw) == 0 {
		return nil, inputErrRule(i, "counts", RuleRequired, "missing: give a count per channel (%s µm)", strings.Join(ci.Keys, ", "))
	}
	counts := make([]uint64, n)
	var seen [8]uint64 // bit per channel; sizes are 0.01 µm apart within 0.1–5 µm, so ≤ 491 channels
	// Map order is random: of several bad keys, report the smallest so the
	// same request always gets the same answer.
	var bad *InputError
	badKey := ""
	note := func(key, rule, format string, args ...any) {
		if bad == nil || key < badKey {
			bad, badKey = inputErrRule(i, "counts."+key, rule, format, args...), key
		}
	}
	for key, c := range raw {
		if p := TextProblem(key, 32); p != "" {
			note(key, RuleText, "the channel key has %s", p)
			continue
		}
		ch, ok := ci.keyIndex[key]
		if !ok {
			sz, err := classify.ParseSize(key)
			if err != nil {
				note(key, RuleChannel, "%q is not a channel size in µm (%s)", key, strings.TrimPrefix(err.Error(), "classify: "))
				continue
			}
			if ch, ok = ci.keyIndex[classify.FormatSize(sz)]; !ok {
				note(key, RuleChannel, "counter %s has no %s µm channel (it has %s µm)", ci.ID, classify.FormatSize(sz), strings.Join(ci.Keys, ", "))
				continue
			}
		}
		if seen[ch/64]&(1<<(ch%64)) != 0 {
			// Blame the later-sorting of the two spellings, whichever the
			// map happened to yield first.
			other := ""
			for k2 := range raw {
				if c2, ok := ci.Channel(k2); ok && c2 == ch && k2 != key {
					other = k2
					break
				}
			}
			key, other = max(key, other), min(key, other)
			note(key, RuleChannel, "names the %s µm channel a second time (also given as %q)", ci.Keys[ch], other)
			continue
		}
		seen[ch/64] |= 1 << (ch % 64)
		if p := c.problem(); p != "" {
			note(key, RuleCount, "%s", p)
			continue
		}
		counts[ch] = c.N
	}
	if bad != nil {
		return nil, bad
	}
	for ch := range n {
		if seen[ch/64]&(1<<(ch%64)) == 0 {
			return nil, inputErrRule(i, "counts."+ci.Keys[ch], RuleChannel, "missing: counter %s reports the %s µm channel", ci.ID, ci.Keys[ch])
		}
	}
	return counts, nil
}

// pressure validates one raw DP sample into out.
func (v *validator) pressure(i int, raw *RawPressure, out *Pressure) *InputError {
	if raw.Sensor == "" {
		return inputErrRule(i, "sensor", RuleRequired, "missing")
	}
	if ie := CheckText(i, "sensor", raw.Sensor, maxIDLen); ie != nil {
		return ie
	}
	si, ok := v.reg.sensors[raw.Sensor]
	if !ok {
		return inputErrRule(i, "sensor", RuleUnknownID, "unknown sensor %q", raw.Sensor)
	}
	t, ie := v.time(i, si.ID, raw.Time)
	if ie != nil {
		return ie
	}
	if raw.Pa == nil {
		return inputErrRule(i, "pa", RuleRequired, "missing: give the differential pressure in Pa")
	}
	pa := *raw.Pa
	if !finite(pa) {
		return inputErrRule(i, "pa", RulePressureFinite, "%g is not a finite pressure in Pa", pa)
	}
	limit := v.b.MaxAbsPa
	if l, ok := v.b.SensorMaxAbsPa[si.ID]; ok {
		limit = l
	}
	if math.Abs(pa) > limit {
		return inputErrRule(i, "pa", RulePressureRange, "%g Pa is beyond ±%g Pa, the largest differential pressure accepted from sensor %s", pa, limit, si.ID)
	}
	*out = Pressure{Sensor: si.ID, Time: t, Pa: pa}
	return nil
}

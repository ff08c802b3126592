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
	oldest time.Time // zero: no retention limit
	newest time.Time
	volTol float64 // < 0: no volume check
}

func (in *Ingest) validator() validator {
	now := in.opt.Now().UTC()
	v := validator{reg: in.reg, newest: now.Add(in.opt.MaxFuture), volTol: in.opt.VolumeTolerance}
	if in.opt.Retention > 0 {
		v.oldest = now.Add(-in.opt.Retention)
	}
	return v
}

// time parses and bounds-checks an element's timestamp.
func (v *validator) time(i int, s string) (time.Time, *InputError) {
	if s == "" {
		return time.Time{}, inputErr(i, "time", "missing: give the sample time in RFC 3339, e.g. 2026-03-02T10:00:00Z")
	}
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, inputErr(i, "time", "%q is not an RFC 3339 time with a zone, e.g. 2026-03-02T10:00:00Z", s)
	}
	t = t.UTC()
	if !v.oldest.IsZero() && t.Before(v.oldest) {
		return time.Time{}, inputErr(i, "time", "%s is older than the retention period (oldest accepted %s)", s, v.oldest.Format(time.RFC3339))
	}
	if t.After(v.newest) {
		return time.Time{}, inputErr(i, "time", "%s is in the future (latest accepted %s): check the sender's clock", s, v.newest.Format(time.RFC3339))
	}
	return t, nil
}

func finite(f float64) bool { return !math.IsNaN(f) && !math.IsInf(f, 0) }

// reading validates and normalises one raw reading into out.
func (v *validator) reading(i int, raw *RawReading, out *Reading) *InputError {
	if raw.Counter == "" {
		return inputErr(i, "counter", "missing")
	}
	ci, ok := v.reg.counters[raw.Counter]
	if !ok {
		return inputErr(i, "counter", "unknown counter %q", raw.Counter)
	}
	t, ie := v.time(i, raw.Time)
	if ie != nil {
		return ie
	}
	mode := ci.Mode
	switch Mode(raw.Mode) {
	case "":
	case ModeCumulative, ModeDifferential:
		mode = Mode(raw.Mode)
	default:
		return inputErr(i, "mode", "unknown mode %q (cumulative or differential)", raw.Mode)
	}
	status := StatusOK
	switch raw.Status {
	case "":
	case StatusOK, StatusWarning, StatusFault:
		status = raw.Status
	default:
		return inputErr(i, "status", "unknown status %q (ok, warning or fault)", raw.Status)
	}
	if raw.VolumeL == nil {
		return inputErr(i, "volume_l", "missing: give the sampled volume in litres")
	}
	vol := *raw.VolumeL
	if !finite(vol) || vol <= 0 {
		return inputErr(i, "volume_l", "%g L: the sampled volume must be a finite number of litres > 0", vol)
	}
	if !finite(raw.FlowLPM) || raw.FlowLPM < 0 {
		return inputErr(i, "flow_lpm", "%g L/min: the flow must be a finite number ≥ 0", raw.FlowLPM)
	}
	if !finite(raw.SampleS) || raw.SampleS < 0 {
		return inputErr(i, "sample_s", "%g s: the sampling time must be a finite number ≥ 0", raw.SampleS)
	}
	if v.volTol >= 0 && raw.FlowLPM > 0 && raw.SampleS > 0 {
		want := raw.FlowLPM * raw.SampleS / 60
		if !finite(want) || math.Abs(vol-want) > v.volTol*want {
			return inputErr(i, "volume_l", "%g L is inconsistent with flow_lpm × sample_s / 60 = %.4g L (tolerance %g %%)", vol, want, v.volTol*100)
		}
	}

	n := len(ci.SizesUM)
	if len(raw.Counts) == 0 {
		return inputErr(i, "counts", "missing: give a count per channel (%s µm)", strings.Join(ci.Keys, ", "))
	}
	counts := make([]uint64, n)
	perM3 := make([]float64, n)
	var seen [8]uint64 // bit per channel; sizes are 0.01 µm apart within 0.1–5 µm, so ≤ 491 channels
	// Map order is random: of several bad keys, report the smallest so the
	// same request always gets the same answer.
	var bad *InputError
	badKey := ""
	note := func(key, format string, args ...any) {
		if bad == nil || key < badKey {
			bad, badKey = inputErr(i, "counts."+key, format, args...), key
		}
	}
	for key, c := range raw.Counts {
		ch, ok := ci.keyIndex[key]
		if !ok {
			sz, err := classify.ParseSize(key)
			if err != nil {
				note(key, "%q is not a channel size in µm (%s)", key, strings.TrimPrefix(err.Error(), "classify: "))
				continue
			}
			if ch, ok = ci.keyIndex[classify.FormatSize(sz)]; !ok {
				note(key, "counter %s has no %s µm channel (it has %s µm)", ci.ID, classify.FormatSize(sz), strings.Join(ci.Keys, ", "))
				continue
			}
		}
		if seen[ch/64]&(1<<(ch%64)) != 0 {
			// Blame the later-sorting of the two spellings, whichever the
			// map happened to yield first.
			other := ""
			for k2 := range raw.Counts {
				if c2, ok := ci.Channel(k2); ok && c2 == ch && k2 != key {
					other = k2
					break
				}
			}
			key, other = max(key, other), min(key, other)
			note(key, "names the %s µm channel a second time (also given as %q)", ci.Keys[ch], other)
			continue
		}
		seen[ch/64] |= 1 << (ch % 64)
		if p := c.problem(); p != "" {
			note(key, "%s", p)
			continue
		}
		counts[ch] = c.N
	}
	if bad != nil {
		return bad
	}
	for ch := range n {
		if seen[ch/64]&(1<<(ch%64)) == 0 {
			return inputErr(i, "counts."+ci.Keys[ch], "missing: counter %s reports the %s µm channel", ci.ID, ci.Keys[ch])
		}
	}
	cum := counts
	if mode == ModeDifferential {
		cum = classify.CumulativeFromDifferential(counts)
	} else if ch, bad := classify.CheckCumulative(counts); bad {
		return inputErr(i, "counts."+ci.Keys[ch], "cumulative count %d at ≥%s µm is more than the %d at ≥%s µm: a larger size cannot see more particles (differential counts need \"mode\":\"differential\")",
			counts[ch], ci.Keys[ch], counts[ch-1], ci.Keys[ch-1])
	}
	for ch, c := range cum {
		perM3[ch] = classify.PerCubicMetre(c, vol)
	}
	if !finite(perM3[0]) {
		return inputErr(i, "volume_l", "%g L is too small a volume for %d particles", vol, cum[0])
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

// pressure validates one raw DP sample into out.
func (v *validator) pressure(i int, raw *RawPressure, out *Pressure) *InputError {
	if raw.Sensor == "" {
		return inputErr(i, "sensor", "missing")
	}
	si, ok := v.reg.sensors[raw.Sensor]
	if !ok {
		return inputErr(i, "sensor", "unknown sensor %q", raw.Sensor)
	}
	t, ie := v.time(i, raw.Time)
	if ie != nil {
		return ie
	}
	if raw.Pa == nil {
		return inputErr(i, "pa", "missing: give the differential pressure in Pa")
	}
	if !finite(*raw.Pa) {
		return inputErr(i, "pa", "%g is not a finite pressure in Pa", *raw.Pa)
	}
	*out = Pressure{Sensor: si.ID, Time: t, Pa: *raw.Pa}
	return nil
}

package classify

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"time"
)

// ErrSamples reports samples that cannot be evaluated.
var ErrSamples = errors.New("classify: invalid samples")

// Sample is one single sample volume drawn at a location: cumulative counts
// (particles at or above each size) aligned with Target.Sizes.
type Sample struct {
	Location  string
	Time      time.Time // zero when not recorded
	VolumeL   float64
	Counts    []uint64
	Ref       string   // where the sample came from, for messages ("samples.csv line 7")
	SampleID  string   // the sample's own number or name, "" when not recorded
	Counter   string   // the counter that drew it, "" when not recorded
	DurationS float64  // sampling time in seconds, 0 when not recorded
	XM, YM    *float64 // the location's coordinates in metres, when given
}

// Verdicts. A plan that is not met (too few locations, a sample too small
// or too short, an instrument whose calibration cannot be vouched for) is
// Incomplete: nothing was shown to fail, but the evidence does not support
// a pass. A measured exceedance is Fail even when the plan was not met:
// ISO 14644-1:2015 A.5–A.6 (from memory) judges each location's mean
// against the limit, and a mean above the limit cannot become acceptable by
// sampling more locations or more air.
const (
	Pass       = "pass"
	Fail       = "fail"
	Incomplete = "incomplete"
)

// Instrument identifies a particle counter for the test report (ISO
// 14644-1:2015 clause 5, from memory: instrument identification and its
// calibration status).
type Instrument struct {
	ID             string    `json:"id"`
	Model          string    `json:"model"`
	Serial         string    `json:"serial"`
	CalibrationDue time.Time `json:"calibration_due"` // the last day the calibration is valid (UTC date)
}

// Options are the parts of a certification beyond the target and the
// samples. The zero value is a plain certification.
type Options struct {
	// Instruments, when not nil, are checked against each sample's
	// counter: an unknown counter or a calibration past due on the
	// sampling date is a departure that keeps the verdict from passing.
	Instruments []Instrument
	// Sequential decides each location by ISO 14644-1:2015 Annex D from
	// its samples in time order, instead of the single-sample-volume rule.
	Sequential bool
	// Macro is the macroparticle descriptor that goes with the
	// designation (Annex C); it is reported, not judged from the counts.
	Macro *Macro
}

// SampleResult is one sample as the report's appendix lists it.
type SampleResult struct {
	Ref         string             `json:"ref"`
	Sample      string             `json:"sample,omitempty"`
	Time        *time.Time         `json:"time,omitempty"`
	Counter     string             `json:"counter,omitempty"`
	VolumeL     float64            `json:"volume_l"`
	Minutes     float64            `json:"minutes"`
	MinutesFrom string             `json:"minutes_from"` // "duration_s", or "volume_and_flow"
	Counts      map[string]uint64  `json:"counts"`
	PerM3       map[string]float64 `json:"per_m3"`
}

// LocationResult is the evaluation of one sampling location. MeanPerM3 is
// the mean of the samples' concentrations (the criterion, ISO
// 14644-1:2015 A.5.2); PooledPerM3 is the total count over the total
// volume and Upper95PerM3 its exact 95 % Poisson upper bound: both are
// informative only, no edition judges by them.
type LocationResult struct {
	ID            string                      `json:"id"`
	Samples       int                         `json:"samples"`
	VolumeL       float64                     `json:"volume_l"`
	MeanPerM3     map[string]float64          `json:"mean_per_m3"`
	PooledPerM3   map[string]float64          `json:"pooled_per_m3_informative"`
	Upper95PerM3  map[string]float64          `json:"poisson_upper95_per_m3_informative"`
	PassBySize    map[string]*bool            `json:"pass_by_size"`
	Pass          bool                        `json:"pass"`
	XM            *float64                    `json:"x_m,omitempty"`
	YM            *float64                    `json:"y_m,omitempty"`
	SampleResults []SampleResult              `json:"sample_results"`
	Sequential    map[string]SequentialResult `json:"sequential,omitempty"`
}

// Report is the outcome of certifying a zone. Its JSON form is the
// `certify --format json` schema, whose keys scripts rely on.
type Report struct {
	Verdict           string              `json:"verdict"`
	Class             *float64            `json:"class"`
	Grade             *string             `json:"grade"`
	Edition           Edition             `json:"edition"`
	State             string              `json:"state"`
	Designation       string              `json:"designation"`
	AreaM2            float64             `json:"area_m2"`
	Sizes             []string            `json:"sizes_um"`
	RequiredLocations int                 `json:"required_locations"`
	Locations         []LocationResult    `json:"locations"`
	LimitsPerM3       map[string]*float64 `json:"limits_per_m3"`
	UCL95PerM3        map[string]float64  `json:"ucl95_per_m3,omitempty"`
	AchievedClass     *float64            `json:"achieved_class"`
	Problems          []string            `json:"problems"`
	Departures        []string            `json:"departures"`
	Warnings          []string            `json:"warnings"`
	Instruments       []Instrument        `json:"instruments,omitempty"`
	Macro             *Macro              `json:"macro,omitempty"`
	Sequential        bool                `json:"sequential"`
	Plan              Plan                `json:"plan"`
	SamplesFrom       *time.Time          `json:"samples_from,omitempty"`
	SamplesTo         *time.Time          `json:"samples_to,omitempty"`
}

// certification is the working state of one Certify call.
type certification struct {
	t       Target
	opt     Options
	plan    Plan
	limits  []SizeLimit
	sizes   []string
	order   []string
	byLoc   map[string][]Sample
	r       Report
	failed  bool // a measured exceedance
	unmet   bool // the plan or the method was not met
	minVolL float64
}

func (c *certification) fail(format string, a ...any) {
	c.failed = true
	c.r.Problems = append(c.r.Problems, fmt.Sprintf(format, a...))
}

func (c *certification) incomplete(format string, a ...any) {
	c.unmet = true
	c.r.Problems = append(c.r.Problems, fmt.Sprintf(format, a...))
}

func (c *certification) departure(format string, a ...any) {
	msg := fmt.Sprintf(format, a...)
	c.unmet = true
	c.r.Departures = append(c.r.Departures, msg)
	c.r.Problems = append(c.r.Problems, msg)
}

// Certify evaluates samples against a target with no options; see
// CertifyWith.
func Certify(t Target, samples []Sample) (Report, error) {
	return CertifyWith(t, samples, Options{})
}

// CertifyWith evaluates samples against a target. Bad input (no samples, a
// sample whose counts do not match the sizes, a non-positive volume,
// cumulative counts that increase with size, location ids that differ only
// in case, one sample given twice with different counts) is an error that
// names the sample. Everything else is in the report, all of it, not only
// the first:
//
//   - fail: a location mean above the limit at a judged size, or for the
//     1999 edition with 2 to 9 locations the 95 % UCL above it (Annex C);
//     under Options.Sequential, a location that crossed the upper line;
//   - incomplete: fewer locations than the plan needs; a sample smaller
//     than the single sample volume or shorter than one minute (A.4.2); a
//     1999 single location with fewer than three samples; grade A below
//     1 m³ per location; a departure (an identical row given twice and
//     counted once, a counter not listed or past its calibration).
//
// Fail wins over incomplete.
func CertifyWith(t Target, samples []Sample, opt Options) (Report, error) {
	plan, err := MakePlan(t)
	if err != nil {
		return Report{}, err
	}
	limits, _, _ := t.normalise() // cannot fail: MakePlan succeeded on the same target
	c := &certification{t: t, opt: opt, plan: plan, limits: limits, byLoc: map[string][]Sample{}}
	c.sizes = append([]string(nil), plan.Sizes...)
	c.minVolL = SampleVolumeL(plan.LimitAtLargestPerM3)
	c.r = Report{
		Edition: plan.Edition, State: plan.State, AreaM2: plan.AreaM2, Sizes: c.sizes,
		RequiredLocations: plan.Locations, LimitsPerM3: plan.LimitsPerM3,
		Problems: []string{}, Departures: []string{}, Warnings: append([]string{}, plan.Notes...), Plan: plan,
		Instruments: opt.Instruments, Macro: opt.Macro, Sequential: opt.Sequential,
	}
	if plan.Class != nil {
		cl := *plan.Class
		c.r.Class = &cl
	} else {
		g := plan.Grade
		c.r.Grade = &g
	}
	c.r.Designation = Designation(t, opt.Macro)
	if err := c.group(samples); err != nil {
		return Report{}, err
	}
	if len(c.order) < plan.Locations {
		c.incomplete("%d locations sampled; the plan for %s m² needs at least %d (ISO 14644-1:%s)",
			len(c.order), FormatSize(plan.AreaM2), plan.Locations, plan.Edition)
	}
	if plan.Edition == Edition1999 && len(c.order) == 1 && len(c.byLoc[c.order[0]]) < 3 {
		c.incomplete("location %s: %d samples; with a single location sampled the 1999 edition needs at least 3 there",
			c.order[0], len(c.byLoc[c.order[0]]))
	}
	c.checkInstruments()
	means := make([][]float64, len(limits)) // per size, per location
	for _, id := range c.order {
		lr := c.location(id)
		for i := range limits {
			means[i] = append(means[i], lr.MeanPerM3[c.sizes[i]])
		}
		c.r.Locations = append(c.r.Locations, lr)
	}
	if err := c.ucl(means); err != nil {
		return Report{}, err
	}
	switch {
	case c.failed:
		c.r.Verdict = Fail
	case c.unmet:
		c.r.Verdict = Incomplete
	default:
		c.r.Verdict = Pass
	}
	if !c.unmet {
		c.r.AchievedClass = achievedClass(c.t.Edition, limits, means, c.r.UCL95PerM3, c.sizes, c.smallestSample())
	}
	return c.r, nil
}

// group checks every sample, groups them by location in the order the
// locations first appear, and counts an identical repeated row once.
func (c *certification) group(samples []Sample) error {
	if len(samples) == 0 {
		return fmt.Errorf("%w: no samples", ErrSamples)
	}
	spelling := map[string]string{} // folded id → first spelling
	seen := map[string]Sample{}     // folded id, counter, sample id or time → first sample
	var first, last time.Time
	for i, s := range samples {
		if s.Ref == "" {
			s.Ref = fmt.Sprintf("sample %d", i)
		}
		if err := c.checkSample(s); err != nil {
			return err
		}
		fold := strings.ToLower(s.Location)
		if sp, ok := spelling[fold]; ok && sp != s.Location {
			return fmt.Errorf("%w: %s: location %q differs from location %q only in case; use one spelling", ErrSamples, s.Ref, s.Location, sp)
		}
		if key, ok := repeatKey(fold, s); ok {
			if prev, dup := seen[key]; dup {
				if !sameReading(prev, s) {
					return fmt.Errorf("%w: %s and %s are the same sample of location %s with different values", ErrSamples, prev.Ref, s.Ref, s.Location)
				}
				c.departure("%s repeats %s: counted once", s.Ref, prev.Ref)
				continue
			}
			seen[key] = s
		}
		if _, ok := spelling[fold]; !ok {
			spelling[fold] = s.Location
			c.order = append(c.order, s.Location)
		}
		c.byLoc[s.Location] = append(c.byLoc[s.Location], s)
		if !s.Time.IsZero() {
			if first.IsZero() || s.Time.Before(first) {
				first = s.Time
			}
			if s.Time.After(last) {
				last = s.Time
			}
		}
	}
	if !first.IsZero() {
		f, l := first.UTC(), last.UTC()
		c.r.SamplesFrom, c.r.SamplesTo = &f, &l
	}
	return nil
}

func (c *certification) checkSample(s Sample) error {
	if s.Location == "" {
		return fmt.Errorf("%w: %s: location is empty", ErrSamples, s.Ref)
	}
	if !(s.VolumeL > 0) || math.IsInf(s.VolumeL, 0) {
		return fmt.Errorf("%w: %s: volume %v L must be positive", ErrSamples, s.Ref, s.VolumeL)
	}
	if s.DurationS < 0 || math.IsNaN(s.DurationS) || math.IsInf(s.DurationS, 0) {
		return fmt.Errorf("%w: %s: duration %v s must be a positive number", ErrSamples, s.Ref, s.DurationS)
	}
	if len(s.Counts) != len(c.limits) {
		return fmt.Errorf("%w: %s: %d counts for %d sizes", ErrSamples, s.Ref, len(s.Counts), len(c.limits))
	}
	if j, bad := CheckCumulative(s.Counts); bad {
		return fmt.Errorf("%w: %s: cumulative count at %s µm (%d) is above the count at %s µm (%d)",
			ErrSamples, s.Ref, c.sizes[j], s.Counts[j], c.sizes[j-1], s.Counts[j-1])
	}
	return nil
}

// repeatKey identifies a sample by its location, counter and its sample id
// or, without one, its time; a sample with neither cannot be told apart
// from a legitimate second sample and has no key.
func repeatKey(foldedLoc string, s Sample) (string, bool) {
	counter := strings.ToLower(s.Counter)
	switch {
	case s.SampleID != "":
		return foldedLoc + "\x00" + counter + "\x00id:" + s.SampleID, true
	case !s.Time.IsZero():
		return foldedLoc + "\x00" + counter + "\x00t:" + s.Time.UTC().Format(time.RFC3339Nano), true
	}
	return "", false
}

func sameReading(a, b Sample) bool {
	if a.VolumeL != b.VolumeL || a.DurationS != b.DurationS || !a.Time.Equal(b.Time) || len(a.Counts) != len(b.Counts) {
		return false
	}
	for i := range a.Counts {
		if a.Counts[i] != b.Counts[i] {
			return false
		}
	}
	return true
}

// minutes is a sample's sampling time: its recorded duration, or its
// volume at the target's flow.
func (c *certification) minutes(s Sample) (float64, string) {
	if s.DurationS > 0 {
		return s.DurationS / 60, "duration_s"
	}
	return s.VolumeL / c.t.FlowLPM, "volume_and_flow"
}

// location evaluates one location: its samples, their sizes and times,
// its mean against the limit (or the sequential decision).
func (c *certification) location(id string) LocationResult {
	ss := c.byLoc[id]
	lr := LocationResult{ID: id, Samples: len(ss), MeanPerM3: map[string]float64{}, PooledPerM3: map[string]float64{},
		Upper95PerM3: map[string]float64{}, PassBySize: map[string]*bool{}, Pass: true}
	total := make([]uint64, len(c.limits))
	sum := make([]float64, len(c.limits))
	for _, s := range ss {
		lr.VolumeL += s.VolumeL
		lr.SampleResults = append(lr.SampleResults, c.sampleResult(s))
		c.coordinates(&lr, s)
		if !c.opt.Sequential && s.VolumeL < c.minVolL*(1-1e-9) {
			c.incomplete("location %s, %s: %s L is below the single sample volume %s L",
				id, s.Ref, fmtNum(s.VolumeL), fmtNum(c.plan.SampleVolumeL))
			lr.Pass = false
		}
		if m, from := c.minutes(s); m < MinSampleMinutes*(1-1e-9) {
			how := "from duration_s"
			if from != "duration_s" {
				how = fmt.Sprintf("%s L at %s L/min", fmtNum(s.VolumeL), fmtNum(c.t.FlowLPM))
			}
			c.incomplete("location %s, %s: sampled for %.2f min (%s); each sample needs at least 1 minute (ISO 14644-1:2015 A.4.2)",
				id, s.Ref, m, how)
			lr.Pass = false
		}
		for i, n := range s.Counts {
			total[i] += n
			sum[i] += PerCubicMetre(n, s.VolumeL)
		}
	}
	lr.VolumeL = math.Round(lr.VolumeL*1000) / 1000
	if c.plan.MinVolumePerLocationL > 0 && lr.VolumeL < c.plan.MinVolumePerLocationL {
		c.incomplete("location %s: %s L sampled; grade A classification needs at least %s L per location (EU GMP Annex 1, from memory)",
			id, fmtNum(lr.VolumeL), fmtNum(c.plan.MinVolumePerLocationL))
		lr.Pass = false
	}
	for i := range c.limits {
		key := c.sizes[i]
		lr.MeanPerM3[key] = sum[i] / float64(len(ss))
		lr.PooledPerM3[key] = PerCubicMetre(total[i], lr.VolumeL)
		up, _ := PoissonUpper(total[i], 0.95)
		lr.Upper95PerM3[key] = up * 1000 / lr.VolumeL
	}
	if c.opt.Sequential {
		c.judgeSequential(&lr, ss)
	} else {
		c.judgeMeans(&lr)
	}
	return lr
}

func (c *certification) judgeMeans(lr *LocationResult) {
	for i, l := range c.limits {
		if !l.Specified {
			continue
		}
		key := c.sizes[i]
		m := lr.MeanPerM3[key]
		ok := m <= l.PerM3
		lr.PassBySize[key] = &ok
		if !ok {
			lr.Pass = false
			c.fail("location %s: mean %s /m³ at ≥%s µm exceeds the limit %s /m³", lr.ID, fmtNum(m), key, fmtNum(l.PerM3))
		}
	}
}

func (c *certification) sampleResult(s Sample) SampleResult {
	m, from := c.minutes(s)
	sr := SampleResult{Ref: s.Ref, Sample: s.SampleID, Counter: s.Counter, VolumeL: s.VolumeL,
		Minutes: math.Round(m*1000) / 1000, MinutesFrom: from, Counts: map[string]uint64{}, PerM3: map[string]float64{}}
	if !s.Time.IsZero() {
		tm := s.Time.UTC()
		sr.Time = &tm
	}
	for i, n := range s.Counts {
		sr.Counts[c.sizes[i]] = n
		sr.PerM3[c.sizes[i]] = PerCubicMetre(n, s.VolumeL)
	}
	return sr
}

// coordinates takes a location's coordinates from its first sample that
// has them and warns when a later sample gives others.
func (c *certification) coordinates(lr *LocationResult, s Sample) {
	if s.XM == nil || s.YM == nil {
		return
	}
	if lr.XM == nil {
		x, y := *s.XM, *s.YM
		lr.XM, lr.YM = &x, &y
		return
	}
	if *lr.XM != *s.XM || *lr.YM != *s.YM {
		c.r.Warnings = append(c.r.Warnings, fmt.Sprintf("location %s, %s: coordinates (%v, %v) m differ from the (%v, %v) m given first; the first are reported",
			lr.ID, s.Ref, *s.XM, *s.YM, *lr.XM, *lr.YM))
	}
}

func (c *certification) ucl(means [][]float64) error {
	if !needsUCL(c.plan.Edition, len(c.order)) {
		return nil
	}
	c.r.UCL95PerM3 = map[string]float64{}
	for i, l := range c.limits {
		u, err := UCL95(means[i])
		if err != nil {
			return err
		}
		c.r.UCL95PerM3[c.sizes[i]] = u
		if l.Specified && u > l.PerM3 {
			c.fail("95 %% UCL of the %d location means at ≥%s µm is %s /m³, above the limit %s /m³ (ISO 14644-1:1999 Annex C)",
				len(c.order), c.sizes[i], fmtNum(u), fmtNum(l.PerM3))
		}
	}
	return nil
}

// smallestSample is the smallest single sample volume of the whole set,
// the figure a class's own sample volume must not exceed for that class to
// be claimed.
func (c *certification) smallestSample() float64 {
	v := math.Inf(1)
	for _, ss := range c.byLoc {
		for _, s := range ss {
			v = math.Min(v, s.VolumeL)
		}
	}
	return v
}

// needsUCL tells whether the edition asks for the 95 % UCL: only the 1999
// edition, and only for 2 to 9 locations.
func needsUCL(ed Edition, locations int) bool {
	return ed == Edition1999 && locations >= 2 && locations <= 9
}

// achievedClass is the cleanest ISO class, in 0.1 steps, that the samples
// support: every considered size has a cell for that class in the
// edition's table (a published value or the formula, never a blank), every
// location mean (and the UCL where the edition uses it) is within it, and
// every sample is at least that class's single sample volume. Nil when no
// class qualifies.
func achievedClass(ed Edition, limits []SizeLimit, means [][]float64, ucl map[string]float64, sizes []string, smallestL float64) *float64 {
	for k := 10; k <= 90; k++ {
		n := float64(k) / 10
		if classQualifies(n, ed, limits, means, ucl, sizes, smallestL) {
			return &n
		}
	}
	return nil
}

func classQualifies(n float64, ed Edition, limits []SizeLimit, means [][]float64, ucl map[string]float64, sizes []string, smallestL float64) bool {
	var atLargest float64
	for i, l := range limits {
		cell, err := ISOLimit(n, l.SizeUM, ed)
		if err != nil || !cell.Specified {
			return false
		}
		for _, m := range means[i] {
			if m > cell.PerM3 {
				return false
			}
		}
		if u, has := ucl[sizes[i]]; has && u > cell.PerM3 {
			return false
		}
		atLargest = cell.PerM3
	}
	return smallestL >= SampleVolumeL(atLargest)*(1-1e-9)
}

// fmtNum writes a concentration or volume compactly for messages.
func fmtNum(v float64) string {
	switch {
	case v >= 100:
		return fmt.Sprintf("%.0f", v)
	case v >= 10:
		return fmt.Sprintf("%.1f", v)
	default:
		return fmt.Sprintf("%.2f", v)
	}
}

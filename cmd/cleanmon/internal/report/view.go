package report

import (
	"fmt"
	"math"
	"sort"
	"strings"
	"time"

	"cleanmon/classify"
)

// Caution is printed on every certification output: the verdict is an
// aid to, not a substitute for, the people and rules accountable for it.
const Caution = "This report supports, and does not replace, the site's qualified people, its procedures and the applicable standards and regulations."

// view is one certification laid out for people: every renderer (text,
// HTML, PDF) prints the same rows in the same order, so the formats
// cannot tell different stories.
type view struct {
	ID          string
	Target      string
	Designation string
	Verdict     string // PASS, FAIL, INCOMPLETE
	VerdictKey  string // pass, fail, incomplete
	Meta        []metaRow
	Sizes       []string
	Summary     []summaryRow
	UCL         string
	Achieved    string
	Sequential  []string
	Problems    []string
	Departures  []string
	Warnings    []string
	Instruments []instrumentRow
	NoInstr     string // why no calibration status is shown, when none is
	Samples     []sampleRow
	Map         *mapView
	MapNote     string
	Caution     string
	Signatures  []sigLine
}

type metaRow struct{ Label, Value string }

type summaryRow struct {
	First                                    bool // first row of a location
	Rows                                     int  // rows of the location, on its first row
	Location, Position, Samples, Volume      string
	Size, Limit, Mean, Pooled, Upper, Result string
	Over                                     bool
}

type instrumentRow struct{ ID, Model, Serial, Due, Status string }

type sampleRow struct {
	Location, Sample, Time, Counter, Volume, Minutes string
	Counts, PerM3                                    []string
}

type mapView struct {
	LengthM, WidthM float64
	Points          []mapPoint
}

type mapPoint struct {
	ID     string
	XM, YM float64
	Status string // within, over, not judged
}

func verdictWord(v string) string {
	switch v {
	case classify.Pass:
		return "PASS"
	case classify.Incomplete:
		return "INCOMPLETE"
	}
	return "FAIL"
}

// newView lays out o; t is the target it was certified against.
func newView(t classify.Target, o Certification) (view, error) {
	r := o.Report
	id, err := ID(o)
	if err != nil {
		return view{}, err
	}
	v := view{ID: id, Target: t.Name(), Designation: r.Designation, Verdict: verdictWord(r.Verdict), VerdictKey: r.Verdict,
		Sizes: r.Sizes, Problems: r.Problems, Departures: r.Departures, Warnings: r.Warnings, Caution: Caution}
	if v.Designation == "" {
		v.Designation = t.Name()
	}
	v.Meta = metaRows(o)
	v.Summary = summaryRows(r)
	if len(r.UCL95PerM3) > 0 {
		var parts []string
		for _, key := range r.Sizes {
			parts = append(parts, fmt.Sprintf("≥%s µm %s /m³", key, num(r.UCL95PerM3[key])))
		}
		v.UCL = fmt.Sprintf("95 %% upper confidence limit of the %d location means (ISO 14644-1:1999 Annex C): %s", len(r.Locations), strings.Join(parts, "; "))
	}
	switch {
	case r.AchievedClass != nil:
		v.Achieved = "ISO " + classify.FormatClass(*r.AchievedClass) + " (by the class formula, a measure of margin)"
	case r.Verdict == classify.Incomplete:
		v.Achieved = "not stated: the plan was not met"
	default:
		v.Achieved = "none that the considered sizes and sample volumes support"
	}
	v.Sequential = sequentialLines(r)
	v.Instruments, v.NoInstr = instrumentRows(r)
	v.Samples = sampleRows(r, o.SamplesFile)
	v.Map, v.MapNote = locationMap(o)
	v.Signatures = signatureLines(o.Signatures)
	return v, nil
}

func metaRows(o Certification) []metaRow {
	r := o.Report
	rows := []metaRow{
		{"Designation", r.Designation},
		{"Standard", "ISO 14644-1:" + string(r.Edition)},
		{"Site", orNone(o.Site)},
		{"Zone", orNone(o.Zone)},
		{"Testing organisation", orNone(o.Organisation)},
		{"Operator", orNone(o.Operator)},
	}
	if o.Certifier != "" {
		rows = append(rows, metaRow{"Responsible", o.Certifier})
	}
	rows = append(rows, metaRow{"Dates of sampling", samplingDates(r)}, metaRow{"Report date", orNone(o.Date)})
	samples := o.SamplesFile
	if o.SamplesSHA256 != "" {
		samples += " (SHA-256 " + o.SamplesSHA256 + ")"
	}
	if o.Differential {
		samples += "; per-channel counts made cumulative"
	}
	rows = append(rows, metaRow{"Samples", orNone(samples)})
	method := "single sample volume at each location (ISO 14644-1 A.4)"
	if r.Sequential {
		method = "sequential sampling (ISO 14644-1:2015 Annex D)"
	}
	rows = append(rows,
		metaRow{"Method", method},
		metaRow{"Plan", fmt.Sprintf("%s m², at least %d locations, single sample at least %.2f L and 1 min at %s L/min",
			classify.FormatSize(r.AreaM2), r.RequiredLocations, r.Plan.SampleVolumeL, classify.FormatSize(r.Plan.FlowLPM))})
	if r.Macro != nil {
		rows = append(rows, metaRow{"Macroparticles", r.Macro.String() + " (as stated; not judged from these counts)"})
	}
	return rows
}

func samplingDates(r classify.Report) string {
	if r.SamplesFrom == nil || r.SamplesTo == nil {
		return "not recorded in the samples"
	}
	const f = "2006-01-02 15:04"
	return r.SamplesFrom.UTC().Format(f) + " – " + r.SamplesTo.UTC().Format(f) + " UTC"
}

func summaryRows(r classify.Report) []summaryRow {
	var out []summaryRow
	for _, l := range r.Locations {
		for i, key := range r.Sizes {
			row := summaryRow{Size: "≥" + key, Mean: num(l.MeanPerM3[key]), Pooled: num(l.PooledPerM3[key]), Upper: num(l.Upper95PerM3[key])}
			if i == 0 {
				row.First, row.Rows = true, len(r.Sizes)
				row.Location, row.Samples, row.Volume = l.ID, fmt.Sprint(l.Samples), fmt.Sprintf("%.1f", l.VolumeL)
				row.Position = position(l)
			}
			row.Limit, row.Result = "no limit", "not judged"
			if lim := r.LimitsPerM3[key]; lim != nil {
				row.Limit = GroupDigits(*lim)
				row.Result = "within"
				if p := l.PassBySize[key]; p != nil && !*p {
					row.Result, row.Over = "OVER LIMIT", true
				}
			}
			out = append(out, row)
		}
	}
	return out
}

func position(l classify.LocationResult) string {
	if l.XM == nil || l.YM == nil {
		return "—"
	}
	return fmt.Sprintf("%.1f, %.1f", *l.XM, *l.YM)
}

func sequentialLines(r classify.Report) []string {
	if !r.Sequential {
		return nil
	}
	var out []string
	for _, l := range r.Locations {
		for _, key := range r.Sizes {
			s, ok := l.Sequential[key]
			if !ok {
				continue
			}
			out = append(out, fmt.Sprintf("%s ≥%s µm: %s at point %d, %.1f L, count %d, expected %.2f (lines %.2f–%.2f): %s",
				l.ID, key, s.Decision, s.Step, s.VolumeL, s.Count, s.Expected, s.Lower, s.Upper, s.Reason))
		}
	}
	return out
}

// instrumentRows lists every instrument named by the list or by a sample,
// with its calibration status over the samples it drew. Without a list
// the status is unknown and said so, never assumed.
func instrumentRows(r classify.Report) ([]instrumentRow, string) {
	times := map[string][]time.Time{} // folded counter → sample times (zero when unrecorded)
	var named []string
	for _, l := range r.Locations {
		for _, s := range l.SampleResults {
			if s.Counter == "" {
				continue
			}
			k := strings.ToLower(s.Counter)
			if _, ok := times[k]; !ok {
				named = append(named, s.Counter)
			}
			var at time.Time
			if s.Time != nil {
				at = *s.Time
			}
			times[k] = append(times[k], at)
		}
	}
	var rows []instrumentRow
	listed := map[string]bool{}
	for _, in := range r.Instruments {
		listed[strings.ToLower(in.ID)] = true
		rows = append(rows, instrumentRow{ID: in.ID, Model: orNone(in.Model), Serial: orNone(in.Serial),
			Due: in.CalibrationDue.UTC().Format(time.DateOnly), Status: calibrationStatus(in, times[strings.ToLower(in.ID)])})
	}
	sort.Strings(named)
	for _, c := range named {
		if !listed[strings.ToLower(c)] {
			rows = append(rows, instrumentRow{ID: c, Model: "—", Serial: "—", Due: "—", Status: "UNKNOWN: not in the instruments list"})
		}
	}
	if r.Instruments == nil {
		return rows, "No instruments list was given: the calibration status of the counters is unknown and this report does not vouch for it."
	}
	return rows, ""
}

func calibrationStatus(in classify.Instrument, at []time.Time) string {
	if len(at) == 0 {
		return "no sample drawn with it"
	}
	past, undated := 0, 0
	for _, t := range at {
		switch {
		case t.IsZero():
			undated++
		case !in.CalibrationValidOn(t):
			past++
		}
	}
	switch {
	case past > 0:
		return fmt.Sprintf("PAST DUE for %d of %d samples", past, len(at))
	case undated > 0:
		return fmt.Sprintf("UNKNOWN: %d samples without a time", undated)
	}
	return "valid on every sampling date"
}

func sampleRows(r classify.Report, file string) []sampleRow {
	var out []sampleRow
	for _, l := range r.Locations {
		for _, s := range l.SampleResults {
			row := sampleRow{Location: l.ID, Sample: s.Sample, Time: "—", Counter: orNone(s.Counter),
				Volume: fmt.Sprintf("%.2f", s.VolumeL), Minutes: fmt.Sprintf("%.2f", s.Minutes)}
			if row.Sample == "" {
				row.Sample = s.Ref
				if file != "" {
					row.Sample = strings.TrimPrefix(s.Ref, file+" ") // "line 7": the file is named above
				}
			}
			if s.Time != nil {
				row.Time = s.Time.UTC().Format("2006-01-02 15:04:05")
			}
			if s.MinutesFrom != "duration_s" {
				row.Minutes += "*"
			}
			for _, key := range r.Sizes {
				row.Counts = append(row.Counts, fmt.Sprint(s.Counts[key]))
				row.PerM3 = append(row.PerM3, num(s.PerM3[key]))
			}
			out = append(out, row)
		}
	}
	return out
}

// locationMap places the locations with coordinates in the room; the
// room is the one given, or the smallest whole-metre rectangle holding
// every location.
func locationMap(o Certification) (*mapView, string) {
	m := &mapView{}
	for _, l := range o.Locations {
		if l.XM == nil || l.YM == nil {
			continue
		}
		st := "within"
		for _, key := range o.Sizes {
			p := l.PassBySize[key]
			if p != nil && !*p {
				st = "over"
			}
		}
		if st == "within" && !anyJudged(l) {
			st = "not judged"
		}
		m.Points = append(m.Points, mapPoint{ID: l.ID, XM: *l.XM, YM: *l.YM, Status: st})
		m.LengthM, m.WidthM = math.Max(m.LengthM, *l.XM), math.Max(m.WidthM, *l.YM)
	}
	if len(m.Points) == 0 {
		return nil, "No location coordinates were given (x_m and y_m in the samples, or the zone's length and width for the plan layout)."
	}
	note := "Positions in metres from one corner of the zone, x along its length, y along its width."
	if o.Room != nil {
		m.LengthM, m.WidthM = math.Max(m.LengthM, o.Room.LengthM), math.Max(m.WidthM, o.Room.WidthM)
	} else {
		m.LengthM, m.WidthM = math.Ceil(m.LengthM+0.5), math.Ceil(m.WidthM+0.5)
		note += " The zone's outline was not given: the frame only encloses the locations."
	}
	if o.PositionsFromPlan {
		note += " Locations without coordinates of their own are placed at the plan layout's section centres, in the order they were sampled."
	}
	if n := len(o.Locations) - len(m.Points); n > 0 {
		note += fmt.Sprintf(" %d locations have no coordinates and are not drawn.", n)
	}
	return m, note
}

func anyJudged(l classify.LocationResult) bool {
	for _, p := range l.PassBySize {
		if p != nil {
			return true
		}
	}
	return false
}

func num(v float64) string { return GroupDigits(round1(v)) }

func round1(v float64) float64 {
	if v >= 100 {
		return float64(int64(v + 0.5))
	}
	return float64(int64(v*10+0.5)) / 10
}

func orNone(s string) string {
	if strings.TrimSpace(s) == "" {
		return "—"
	}
	return s
}

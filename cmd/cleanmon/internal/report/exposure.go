package report

import (
	"fmt"
	"html/template"
	"io"
	"sort"
	"strings"
	"time"

	"cleanmon/classify"
)

// Exposure is the exposure of a production run as GET
// /api/v1/runs/{id}/exposure answers it: the report renders that answer,
// and computes nothing of its own.
type Exposure struct {
	Site        string             `json:"site"`
	Run         Run                `json:"run"`
	ZoneName    string             `json:"zone_name"`
	Target      string             `json:"target"`
	Until       time.Time          `json:"until"`
	Generated   time.Time          `json:"generated"`
	Alarms      []ExposureAlarm    `json:"alarms"`
	Excursions  int                `json:"excursions"`
	TimeByLevel map[string]float64 `json:"time_by_level_s"`
	Peaks       []Peak             `json:"peaks"`
	Notes       []string           `json:"notes"`
	Caution     string             `json:"caution"`
}

// Run is a production run as the API answers it.
type Run struct {
	ID         string     `json:"id"`
	Zone       string     `json:"zone"`
	Start      time.Time  `json:"start"`
	End        *time.Time `json:"end"`
	Open       bool       `json:"open"`
	Product    string     `json:"product"`
	Lot        string     `json:"lot"`
	RecordedBy string     `json:"recorded_by"`
	Recorded   time.Time  `json:"recorded"`
}

// ExposureAlarm is an alarm that overlapped the run.
type ExposureAlarm struct {
	ID        string     `json:"id"`
	Kind      string     `json:"kind"`
	Level     string     `json:"level"`
	Location  string     `json:"location"`
	SizeUM    *float64   `json:"size_um"`
	Since     time.Time  `json:"since"`
	Cleared   *time.Time `json:"cleared"`
	Peak      float64    `json:"peak"`
	PeakTime  time.Time  `json:"peak_time"`
	Excursion bool       `json:"excursion"`
	// ConditionGone: passed, but latched until acknowledged.
	ConditionGone bool `json:"condition_gone"`
}

// Peak is the highest concentration at one size during the run.
type Peak struct {
	SizeUM   float64   `json:"size_um"`
	Location string    `json:"location"`
	PerM3    float64   `json:"per_m3"`
	Time     time.Time `json:"time"`
}

// levelOrder is the order attention levels are listed in.
var levelOrder = []string{"none", "alert", "action", "out-of-class", "unknown"}

// LevelRow is one attention level's share of a span.
type LevelRow struct {
	Level    string
	Duration time.Duration
	Share    float64 // of the whole span, 0–1
}

// LevelRows orders a time-by-level map (seconds) for a table; levels
// with no time are left out, unknown ones kept at the end.
func LevelRows(m map[string]float64) []LevelRow {
	total := 0.0
	for _, v := range m {
		total += v
	}
	var out []LevelRow
	seen := map[string]bool{}
	add := func(k string) {
		if v := m[k]; v > 0 && !seen[k] {
			seen[k] = true
			share := 0.0
			if total > 0 {
				share = v / total
			}
			out = append(out, LevelRow{Level: k, Duration: time.Duration(v * float64(time.Second)).Round(time.Second), Share: share})
		}
	}
	for _, k := range levelOrder {
		add(k)
	}
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		add(k)
	}
	return out
}

func (r Run) endText() string {
	if r.End == nil {
		return "open"
	}
	return stamp(*r.End)
}

func stamp(t time.Time) string { return t.UTC().Format("2006-01-02 15:04:05") + " UTC" }

func sizeText(p *float64) string {
	if p == nil {
		return "—"
	}
	return "≥" + classify.FormatSize(*p) + " µm"
}

func clearedText(p *time.Time) string {
	if p == nil {
		return "not cleared"
	}
	return stamp(*p)
}

// WriteExposureText writes the exposure as plain text.
func WriteExposureText(w io.Writer, e Exposure) error {
	var b strings.Builder
	fmt.Fprintf(&b, "Exposure of production run %s\n", e.Run.ID)
	fmt.Fprintf(&b, "Site: %s\nZone: %s (%s), %s\n", e.Site, e.ZoneName, e.Run.Zone, e.Target)
	fmt.Fprintf(&b, "Product: %s   Lot: %s\n", dash(e.Run.Product), dash(e.Run.Lot))
	fmt.Fprintf(&b, "Run: %s – %s (recorded by %s)\n", stamp(e.Run.Start), e.Run.endText(), e.Run.RecordedBy)
	fmt.Fprintf(&b, "Figures up to %s; generated %s\n\n", stamp(e.Until), stamp(e.Generated))
	fmt.Fprintf(&b, "Alarms that overlapped the run: %d (%d about particles)\n", len(e.Alarms), e.Excursions)
	for _, a := range e.Alarms {
		gone := ""
		if a.ConditionGone {
			gone = " (condition passed, awaiting acknowledgement)"
		}
		fmt.Fprintf(&b, "  %-7s %-18s %-8s %-10s since %s, cleared %s%s, peak %s\n    %s\n", a.Level, a.Kind, dash(a.Location), sizeText(a.SizeUM),
			stamp(a.Since), clearedText(a.Cleared), gone, GroupDigits(round1(a.Peak)), a.ID)
	}
	b.WriteString("\nTime by attention level:\n")
	for _, r := range LevelRows(e.TimeByLevel) {
		fmt.Fprintf(&b, "  %-13s %12s  %5.1f %%\n", r.Level, r.Duration, 100*r.Share)
	}
	b.WriteString("\nPeak concentration (particles/m³):\n")
	for _, p := range e.Peaks {
		fmt.Fprintf(&b, "  ≥%-4s µm  %12s  at %s, %s\n", classify.FormatSize(p.SizeUM), GroupDigits(p.PerM3), p.Location, stamp(p.Time))
	}
	if len(e.Peaks) == 0 {
		b.WriteString("  none: no trusted reading during the run\n")
	}
	for _, n := range e.Notes {
		fmt.Fprintf(&b, "Note: %s\n", n)
	}
	fmt.Fprintf(&b, "\n%s\n%s\n\nReviewed by (QA): ____________________   Date: __________   Signature: ____________________\n", Caution, e.Caution)
	_, err := io.WriteString(w, b.String())
	return err
}

func dash(s string) string {
	if s == "" {
		return "—"
	}
	return s
}

const exposureStyle = `body{font:14px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif;color:#1d2327;max-width:980px;margin:24px auto;padding:0 16px}
h1{font-size:22px;margin:0 0 4px}h2{font-size:16px;margin:22px 0 8px;border-bottom:1px solid #9aa5ad;padding-bottom:3px}
.meta{display:grid;grid-template-columns:max-content 1fr;gap:2px 14px;margin:10px 0}.meta dt{color:#55606a}.meta dd{margin:0}
table{border-collapse:collapse;width:100%}th,td{border:1px solid #b9c2c9;padding:3px 6px;text-align:left}th{background:#eef1f3}td.n{text-align:right}
.action{font-weight:700}.caution{margin-top:26px;padding:10px 12px;border-left:4px solid #55606a;background:#f4f6f7}
.sign{display:grid;grid-template-columns:1fr 1fr 1fr;gap:30px;margin-top:40px}.sign div{border-top:1px solid #1d2327;padding-top:4px;color:#55606a}
@media print{body{margin:0}}`

const exposureTemplate = `<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>Exposure of run {{.Run.ID}}</title>
<style>` + exposureStyle + `</style></head>
<body>
<h1>Exposure of production run {{.Run.ID}}</h1>
<dl class="meta">
<dt>Site</dt><dd>{{.Site}}</dd>
<dt>Zone</dt><dd>{{.ZoneName}} ({{.Run.Zone}}), {{.Target}}</dd>
<dt>Product / lot</dt><dd>{{dash .Run.Product}} / {{dash .Run.Lot}}</dd>
<dt>Run</dt><dd>{{stamp .Run.Start}} – {{.Run.EndText}} (recorded by {{.Run.RecordedBy}})</dd>
<dt>Figures up to</dt><dd>{{stamp .Until}}</dd>
<dt>Generated</dt><dd>{{stamp .Generated}}</dd>
</dl>
<h2>Alarms that overlapped the run ({{len .Alarms}}, {{.Excursions}} about particles)</h2>
{{if .Alarms}}<table><thead><tr><th>Level</th><th>Kind</th><th>Where</th><th>Size</th><th>Since</th><th>Cleared</th><th>Peak</th><th>Alarm</th></tr></thead><tbody>
{{range .Alarms}}<tr class="{{.Level}}"><td>{{.Level}}</td><td>{{.Kind}}</td><td>{{dash .Location}}</td><td>{{size .SizeUM}}</td><td>{{stamp .Since}}</td><td>{{cleared .Cleared}}{{if .ConditionGone}} (condition passed, awaiting acknowledgement){{end}}</td><td class="n">{{num .Peak}}</td><td>{{.ID}}</td></tr>
{{end}}</tbody></table>{{else}}<p>No alarm of the zone overlapped the run.</p>{{end}}
<h2>Time by attention level</h2>
<table><thead><tr><th>Level</th><th>Time</th><th>Share</th></tr></thead><tbody>
{{range .Levels}}<tr><td>{{.Level}}</td><td>{{.Duration}}</td><td class="n">{{pct .Share}}</td></tr>
{{end}}</tbody></table>
<h2>Peak concentration</h2>
{{if .Peaks}}<table><thead><tr><th>Size</th><th>Peak (particles/m³)</th><th>Location</th><th>Time</th></tr></thead><tbody>
{{range .Peaks}}<tr><td>≥{{fsize .SizeUM}} µm</td><td class="n">{{num .PerM3}}</td><td>{{.Location}}</td><td>{{stamp .Time}}</td></tr>
{{end}}</tbody></table>{{else}}<p>No trusted reading during the run: nothing is known of its air.</p>{{end}}
{{range .Notes}}<p>Note: {{.}}</p>{{end}}
<p class="caution">{{.ReportCaution}} {{.Caution}}</p>
<div class="sign"><div>Reviewed by (QA), name</div><div>Date</div><div>Signature</div></div>
</body></html>
`

var exposureTmpl = template.Must(template.New("exposure").Funcs(funcs).Parse(exposureTemplate))

var funcs = template.FuncMap{
	"num":     func(v float64) string { return GroupDigits(round1(v)) },
	"fsize":   classify.FormatSize,
	"stamp":   stamp,
	"dash":    dash,
	"size":    sizeText,
	"cleared": clearedText,
	"pct":     func(v float64) string { return fmt.Sprintf("%.1f %%", 100*v) },
	"opt": func(p *float64) string {
		if p == nil {
			return "—"
		}
		return GroupDigits(round1(*p))
	},
}

// EndText is the run's end, or "open".
func (r Run) EndText() string { return r.endText() }

// ExposureCSP is the content security policy of the HTML exposure report.
var ExposureCSP = "default-src 'none'; style-src " + styleHashes(exposureTemplate) +
	"; img-src data:; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"

// WriteExposureHTML writes the exposure as a document a QA reviewer signs.
func WriteExposureHTML(w io.Writer, e Exposure) error {
	return exposureTmpl.Execute(w, struct {
		Exposure
		Levels        []LevelRow
		ReportCaution string
	}{e, LevelRows(e.TimeByLevel), Caution})
}

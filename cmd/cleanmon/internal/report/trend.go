package report

import (
	"fmt"
	"html/template"
	"io"
	"math"
	"strings"
	"time"

	"cleanmon/classify"
)

// Trend is a zone's month as GET /api/v1/zones/{zone}/trend answers it;
// the report renders that answer and computes nothing of its own.
type Trend struct {
	Site                string             `json:"site"`
	Zone                string             `json:"zone"`
	ZoneName            string             `json:"zone_name"`
	Target              string             `json:"target"`
	Month               string             `json:"month"`
	PreviousMonth       string             `json:"previous_month"`
	From                time.Time          `json:"from"`
	To                  time.Time          `json:"to"`
	PreviousFrom        time.Time          `json:"previous_from"`
	Generated           time.Time          `json:"generated"`
	Locations           []TrendLocation    `json:"locations"`
	Alarms              []KindLevel        `json:"alarms"`
	AlarmsThis          int                `json:"alarms_this"`
	AlarmsPrevious      int                `json:"alarms_previous"`
	DoorsPerDay         []DayCount         `json:"doors_per_day"`
	DoorsThis           int                `json:"doors_this"`
	DoorsPrevious       int                `json:"doors_previous"`
	TimeByLevel         map[string]float64 `json:"time_by_level_s"`
	PreviousTimeByLevel map[string]float64 `json:"previous_time_by_level_s"`
	Advice              []Advice           `json:"advice"`
	Charts              []TrendChart       `json:"charts"`
	Notes               []string           `json:"notes"`
	Caution             string             `json:"caution"`
}

// TrendLocation is one location and size, the month and the one before.
type TrendLocation struct {
	Location string     `json:"location"`
	SizeUM   float64    `json:"size_um"`
	Alert    *float64   `json:"alert_per_m3"`
	Action   *float64   `json:"action_per_m3"`
	Class    *float64   `json:"class_per_m3"`
	This     TrendStats `json:"this"`
	Previous TrendStats `json:"previous"`
}

// TrendStats are the figures of one span; nil where there were no samples.
type TrendStats struct {
	N          int      `json:"n"`
	Mean       *float64 `json:"mean_per_m3"`
	P95        *float64 `json:"p95_per_m3"`
	P99        *float64 `json:"p99_per_m3"`
	Max        *float64 `json:"max_per_m3"`
	OverAlert  int      `json:"over_alert"`
	OverAction int      `json:"over_action"`
	OverClass  int      `json:"over_class"`
}

// KindLevel counts the alarms of one kind and level.
type KindLevel struct {
	Kind     string `json:"kind"`
	Level    string `json:"level"`
	This     int    `json:"this"`
	Previous int    `json:"previous"`
}

// DayCount is the door openings of one day.
type DayCount struct {
	Day   string `json:"day"`
	Count int    `json:"count"`
}

// Advice is the daemon's level advice at one size over the month.
type Advice struct {
	SizeUM  float64  `json:"size_um"`
	Samples int      `json:"samples"`
	Mean    float64  `json:"mean_per_m3"`
	Alert   *float64 `json:"alert_per_m3"`
	Action  *float64 `json:"action_per_m3"`
	Limit   *float64 `json:"limit_per_m3"`
	Caveats []string `json:"caveats"`
}

// TrendChart is one size: hourly means per location, and the levels.
type TrendChart struct {
	SizeUM float64     `json:"size_um"`
	Alert  *float64    `json:"alert_per_m3"`
	Action *float64    `json:"action_per_m3"`
	Class  *float64    `json:"class_per_m3"`
	Series []TrendLine `json:"series"`
}

// TrendLine is one location's hourly means: [Unix ms, value].
type TrendLine struct {
	Location string       `json:"location"`
	Points   [][2]float64 `json:"points"`
}

func optNum(p *float64) string {
	if p == nil {
		return "—"
	}
	return GroupDigits(round1(*p))
}

// change words the move from the previous month: "+12 %", "new", "—".
func change(this, prev *float64) string {
	switch {
	case this == nil || prev == nil:
		return "—"
	case *prev == 0:
		if *this == 0 {
			return "0 %"
		}
		return "new"
	}
	return fmt.Sprintf("%+.0f %%", 100*(*this-*prev)/math.Abs(*prev))
}

func stats(s TrendStats) string {
	return fmt.Sprintf("n %d, mean %s, p95 %s, p99 %s, max %s; above alert %d, action %d, class %d",
		s.N, optNum(s.Mean), optNum(s.P95), optNum(s.P99), optNum(s.Max), s.OverAlert, s.OverAction, s.OverClass)
}

// WriteTrendText writes the month as plain text.
func WriteTrendText(w io.Writer, t Trend) error {
	var b strings.Builder
	fmt.Fprintf(&b, "Environmental monitoring trend, %s (compared with %s)\n", t.Month, t.PreviousMonth)
	fmt.Fprintf(&b, "Site: %s\nZone: %s (%s), %s\nGenerated %s\n\n", t.Site, t.ZoneName, t.Zone, t.Target, stamp(t.Generated))
	b.WriteString("Concentration per location and size (particles/m³)\n")
	for _, l := range t.Locations {
		fmt.Fprintf(&b, "  %s ≥%s µm  (alert %s, action %s, class %s)\n", l.Location, classify.FormatSize(l.SizeUM), optNum(l.Alert), optNum(l.Action), optNum(l.Class))
		fmt.Fprintf(&b, "    %s: %s\n", t.Month, stats(l.This))
		fmt.Fprintf(&b, "    %s: %s\n", t.PreviousMonth, stats(l.Previous))
		fmt.Fprintf(&b, "    change of the mean %s, of the p95 %s\n", change(l.This.Mean, l.Previous.Mean), change(l.This.P95, l.Previous.P95))
	}
	fmt.Fprintf(&b, "\nAlarms: %d (previous month %d)\n", t.AlarmsThis, t.AlarmsPrevious)
	for _, a := range t.Alarms {
		fmt.Fprintf(&b, "  %-18s %-7s %4d  (%d)\n", a.Kind, a.Level, a.This, a.Previous)
	}
	fmt.Fprintf(&b, "\nDoor openings: %d (previous month %d)\n", t.DoorsThis, t.DoorsPrevious)
	for _, d := range t.DoorsPerDay {
		if d.Count > 0 {
			fmt.Fprintf(&b, "  %s %4d\n", d.Day, d.Count)
		}
	}
	b.WriteString("\nTime by attention level (this month | previous)\n")
	for _, r := range LevelRows(t.TimeByLevel) {
		fmt.Fprintf(&b, "  %-13s %12s  %5.1f %%\n", r.Level, r.Duration, 100*r.Share)
	}
	for _, r := range LevelRows(t.PreviousTimeByLevel) {
		fmt.Fprintf(&b, "  %-13s %12s  %5.1f %%  (previous)\n", r.Level, r.Duration, 100*r.Share)
	}
	b.WriteString("\nLevel advice from the month's samples (particles/m³)\n")
	for _, a := range t.Advice {
		fmt.Fprintf(&b, "  ≥%s µm: alert %s, action %s (limit %s; %d samples, mean %s)\n", classify.FormatSize(a.SizeUM), optNum(a.Alert), optNum(a.Action),
			optNum(a.Limit), a.Samples, GroupDigits(round1(a.Mean)))
		for _, c := range a.Caveats {
			fmt.Fprintf(&b, "    caveat: %s\n", c)
		}
	}
	for _, n := range t.Notes {
		fmt.Fprintf(&b, "Note: %s\n", n)
	}
	fmt.Fprintf(&b, "\n%s\n\nReviewed by (QA): ____________________   Date: __________   Signature: ____________________\n", Caution)
	_, err := io.WriteString(w, b.String())
	return err
}

const trendTemplate = `<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>Trend {{.Zone}} {{.Month}}</title>
<style>` + exposureStyle + `
svg{border:1px solid #b9c2c9;background:#fff;margin:6px 0}svg .ax{font-size:10px;fill:#3c464e}svg .lim{stroke:#a1260d;stroke-width:2}svg .act{stroke:#a1260d;stroke-dasharray:8 4}svg .alt{stroke:#b5470b;stroke-dasharray:3 3}
</style></head>
<body>
<h1>Environmental monitoring trend, {{.Month}}</h1>
<dl class="meta">
<dt>Site</dt><dd>{{.Site}}</dd>
<dt>Zone</dt><dd>{{.ZoneName}} ({{.Zone}}), {{.Target}}</dd>
<dt>Compared with</dt><dd>{{.PreviousMonth}}</dd>
<dt>Generated</dt><dd>{{stamp .Generated}}</dd>
</dl>
<h2>Concentration per location and size (particles/m³)</h2>
<table><thead><tr><th>Location</th><th>Size</th><th>Month</th><th>n</th><th>Mean</th><th>p95</th><th>p99</th><th>Max</th><th>&gt; alert</th><th>&gt; action</th><th>&gt; class</th><th>Alert / action / class</th></tr></thead><tbody>
{{range .Locations}}<tr><td rowspan="2">{{.Location}}</td><td rowspan="2">≥{{fsize .SizeUM}} µm</td><td>{{$.Month}}</td><td class="n">{{.This.N}}</td><td class="n">{{opt .This.Mean}}</td><td class="n">{{opt .This.P95}}</td><td class="n">{{opt .This.P99}}</td><td class="n">{{opt .This.Max}}</td><td class="n">{{.This.OverAlert}}</td><td class="n">{{.This.OverAction}}</td><td class="n">{{.This.OverClass}}</td><td rowspan="2">{{opt .Alert}} / {{opt .Action}} / {{opt .Class}}</td></tr>
<tr><td>{{$.PreviousMonth}}</td><td class="n">{{.Previous.N}}</td><td class="n">{{opt .Previous.Mean}}</td><td class="n">{{opt .Previous.P95}}</td><td class="n">{{opt .Previous.P99}}</td><td class="n">{{opt .Previous.Max}}</td><td class="n">{{.Previous.OverAlert}}</td><td class="n">{{.Previous.OverAction}}</td><td class="n">{{.Previous.OverClass}}</td></tr>
{{end}}</tbody></table>
{{range .ChartSVG}}{{.}}{{end}}
<h2>Alarms: {{.AlarmsThis}} (previous month {{.AlarmsPrevious}})</h2>
{{if .Alarms}}<table><thead><tr><th>Kind</th><th>Level</th><th>{{.Month}}</th><th>{{.PreviousMonth}}</th></tr></thead><tbody>
{{range .Alarms}}<tr><td>{{.Kind}}</td><td>{{.Level}}</td><td class="n">{{.This}}</td><td class="n">{{.Previous}}</td></tr>
{{end}}</tbody></table>{{end}}
<h2>Door openings: {{.DoorsThis}} (previous month {{.DoorsPrevious}})</h2>
<table><thead><tr>{{range .DoorsPerDay}}<th>{{day .Day}}</th>{{end}}</tr></thead><tbody><tr>{{range .DoorsPerDay}}<td class="n">{{.Count}}</td>{{end}}</tr></tbody></table>
<h2>Time by attention level</h2>
<table><thead><tr><th>Level</th><th>{{.Month}}</th><th>Share</th></tr></thead><tbody>
{{range .Levels}}<tr><td>{{.Level}}</td><td>{{.Duration}}</td><td class="n">{{pct .Share}}</td></tr>
{{end}}</tbody></table>
<table><thead><tr><th>Level</th><th>{{.PreviousMonth}}</th><th>Share</th></tr></thead><tbody>
{{range .PreviousLevels}}<tr><td>{{.Level}}</td><td>{{.Duration}}</td><td class="n">{{pct .Share}}</td></tr>
{{end}}</tbody></table>
<h2>Level advice from the month's samples</h2>
<table><thead><tr><th>Size</th><th>Suggested alert</th><th>Suggested action</th><th>Limit</th><th>Samples</th><th>Mean</th><th>Caveats</th></tr></thead><tbody>
{{range .Advice}}<tr><td>≥{{fsize .SizeUM}} µm</td><td class="n">{{opt .Alert}}</td><td class="n">{{opt .Action}}</td><td class="n">{{opt .Limit}}</td><td class="n">{{.Samples}}</td><td class="n">{{num .Mean}}</td><td>{{range .Caveats}}{{.}} {{end}}</td></tr>
{{end}}</tbody></table>
{{range .Notes}}<p>Note: {{.}}</p>{{end}}
<p class="caution">{{.ReportCaution}}</p>
<div class="sign"><div>Reviewed by (QA), name</div><div>Date</div><div>Signature</div></div>
</body></html>
`

var trendTmpl = template.Must(template.New("trend").Funcs(funcs).Funcs(template.FuncMap{
	"day": func(s string) string { return strings.TrimLeft(s[len(s)-2:], "0") },
}).Parse(trendTemplate))

// TrendCSP is the content security policy of the HTML trend report.
var TrendCSP = "default-src 'none'; style-src " + styleHashes(trendTemplate) +
	"; img-src data:; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"

// WriteTrendHTML writes the month on one page.
func WriteTrendHTML(w io.Writer, t Trend) error {
	var charts []template.HTML
	for _, c := range t.Charts {
		charts = append(charts, trendChart(c, t.From, t.To))
	}
	return trendTmpl.Execute(w, struct {
		Trend
		Levels, PreviousLevels []LevelRow
		ChartSVG               []template.HTML
		ReportCaution          string
	}{t, LevelRows(t.TimeByLevel), LevelRows(t.PreviousTimeByLevel), charts, Caution})
}

// trendChart draws one size's hourly means on a log axis with the alert,
// action and class lines; each location has its own dash pattern so the
// chart reads in monochrome.
func trendChart(c TrendChart, from, to time.Time) template.HTML {
	const w, h, l, r, top, bot = 940.0, 220.0, 70.0, 20.0, 24.0, 28.0
	lo, hi := math.Inf(1), math.Inf(-1)
	see := func(v float64) {
		if v > 0 {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	for _, s := range c.Series {
		for _, p := range s.Points {
			see(p[1])
		}
	}
	for _, p := range []*float64{c.Alert, c.Action, c.Class} {
		if p != nil {
			see(*p)
		}
	}
	if math.IsInf(lo, 1) {
		lo, hi = 1, 10
	}
	dlo, dhi := math.Floor(math.Log10(lo)), math.Ceil(math.Log10(hi))
	if dhi <= dlo {
		dhi = dlo + 1
	}
	x := func(ms float64) float64 {
		return l + (w-l-r)*(ms-float64(from.UnixMilli()))/float64(to.UnixMilli()-from.UnixMilli())
	}
	y := func(v float64) float64 { return top + (h-top-bot)*(1-(math.Log10(v)-dlo)/(dhi-dlo)) }
	var b strings.Builder
	fmt.Fprintf(&b, `<svg viewBox="0 0 %.0f %.0f" width="100%%" role="img" aria-label="hourly means at %s µm, log scale">`, w, h, classify.FormatSize(c.SizeUM))
	fmt.Fprintf(&b, `<text class="ax" x="%.0f" y="14">≥%s µm, hourly mean per location (particles/m³, log scale)</text>`, l, classify.FormatSize(c.SizeUM))
	for d := dlo; d <= dhi; d++ {
		fmt.Fprintf(&b, `<line x1="%.1f" x2="%.1f" y1="%.1f" y2="%.1f" stroke="#dde3e7"/><text class="ax" x="4" y="%.1f">%s</text>`, l, w-r, y(math.Pow(10, d)), y(math.Pow(10, d)), y(math.Pow(10, d))+3, GroupDigits(math.Pow(10, d)))
	}
	for _, th := range []struct {
		p   *float64
		cls string
	}{{c.Class, "lim"}, {c.Action, "act"}, {c.Alert, "alt"}} {
		if th.p != nil {
			fmt.Fprintf(&b, `<line class="%s" x1="%.1f" x2="%.1f" y1="%.1f" y2="%.1f"/>`, th.cls, l, w-r, y(*th.p), y(*th.p))
		}
	}
	dashes := []string{"", "6 3", "2 2", "10 3 2 3"}
	for i, s := range c.Series {
		var path strings.Builder
		for j, p := range s.Points {
			if p[1] <= 0 {
				continue
			}
			cmd := "L"
			if j == 0 || p[0]-s.Points[j-1][0] > 2*3.6e6 {
				cmd = "M"
			}
			fmt.Fprintf(&path, "%s%.1f %.1f", cmd, x(p[0]), y(p[1]))
		}
		fmt.Fprintf(&b, `<path d="%s" fill="none" stroke="#1f4e9c" stroke-width="1.2" stroke-dasharray="%s"/>`, path.String(), dashes[i%len(dashes)])
		fmt.Fprintf(&b, `<text class="ax" x="%.0f" y="%.0f">%s: %s</text>`, l+float64(i)*140, h-6, template.HTMLEscapeString(s.Location), []string{"solid", "dashed", "dotted", "dash-dot"}[i%4])
	}
	b.WriteString("</svg>")
	return template.HTML(b.String())
}

// WriteTrendPDF writes the month as PDF.
func WriteTrendPDF(w io.Writer, t Trend) error {
	d := newRecordPDF("Environmental monitoring trend, " + t.Month)
	d.para(fmt.Sprintf("Site: %s\nZone: %s (%s), %s\nCompared with %s; generated %s", t.Site, t.ZoneName, t.Zone, t.Target, t.PreviousMonth, stamp(t.Generated)))
	d.heading("Concentration per location and size (particles/m³)")
	var rows [][]string
	for _, l := range t.Locations {
		for _, m := range []struct {
			name string
			s    TrendStats
		}{{t.Month, l.This}, {t.PreviousMonth, l.Previous}} {
			rows = append(rows, []string{l.Location, "≥" + classify.FormatSize(l.SizeUM), m.name, fmt.Sprint(m.s.N), optNum(m.s.Mean), optNum(m.s.P95),
				optNum(m.s.P99), optNum(m.s.Max), fmt.Sprintf("%d/%d/%d", m.s.OverAlert, m.s.OverAction, m.s.OverClass),
				optNum(l.Alert) + " / " + optNum(l.Action) + " / " + optNum(l.Class)})
		}
	}
	d.table([]float64{14, 12, 15, 12, 19, 19, 19, 19, 18, 33}, []string{"Loc.", "Size", "Month", "n", "Mean", "p95", "p99", "Max", "> al/ac/cl", "Alert/action/class"}, rows)
	d.heading(fmt.Sprintf("Alarms: %d (previous month %d)", t.AlarmsThis, t.AlarmsPrevious))
	rows = nil
	for _, a := range t.Alarms {
		rows = append(rows, []string{a.Kind, a.Level, fmt.Sprint(a.This), fmt.Sprint(a.Previous)})
	}
	d.table([]float64{40, 25, 25, 25}, []string{"Kind", "Level", t.Month, t.PreviousMonth}, rows)
	d.heading(fmt.Sprintf("Door openings: %d (previous month %d)", t.DoorsThis, t.DoorsPrevious))
	var days []string
	for _, dc := range t.DoorsPerDay {
		days = append(days, fmt.Sprintf("%s: %d", dc.Day[len(dc.Day)-2:], dc.Count))
	}
	d.para(strings.Join(days, "   "))
	d.heading("Time by attention level")
	rows = nil
	for _, r := range LevelRows(t.TimeByLevel) {
		rows = append(rows, []string{t.Month, r.Level, r.Duration.String(), fmt.Sprintf("%.1f %%", 100*r.Share)})
	}
	for _, r := range LevelRows(t.PreviousTimeByLevel) {
		rows = append(rows, []string{t.PreviousMonth, r.Level, r.Duration.String(), fmt.Sprintf("%.1f %%", 100*r.Share)})
	}
	d.table([]float64{25, 30, 40, 25}, []string{"Month", "Level", "Time", "Share"}, rows)
	d.heading("Level advice from the month's samples")
	rows = nil
	for _, a := range t.Advice {
		rows = append(rows, []string{"≥" + classify.FormatSize(a.SizeUM) + " µm", optNum(a.Alert), optNum(a.Action), optNum(a.Limit), fmt.Sprint(a.Samples)})
	}
	d.table([]float64{25, 30, 30, 30, 20}, []string{"Size", "Alert", "Action", "Limit", "Samples"}, rows)
	for _, c := range t.Charts {
		d.chart(c, t.From, t.To)
	}
	for _, n := range t.Notes {
		d.para("Note: " + n)
	}
	d.signature(Caution)
	return d.finish(w)
}

// chart draws one size's hourly means on a log axis, as the HTML does.
func (d *recordPDF) chart(c TrendChart, from, to time.Time) {
	const cw, ch = 180.0, 45.0
	if d.GetY()+ch+12 > 280 {
		d.AddPage()
	}
	d.heading("≥" + classify.FormatSize(c.SizeUM) + " µm, hourly mean per location (log scale)")
	x0, y0 := d.GetX(), d.GetY()
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range c.Series {
		for _, p := range s.Points {
			if p[1] > 0 {
				lo, hi = math.Min(lo, p[1]), math.Max(hi, p[1])
			}
		}
	}
	for _, p := range []*float64{c.Alert, c.Action, c.Class} {
		if p != nil && *p > 0 {
			lo, hi = math.Min(lo, *p), math.Max(hi, *p)
		}
	}
	if math.IsInf(lo, 1) {
		lo, hi = 1, 10
	}
	dlo, dhi := math.Floor(math.Log10(lo)), math.Ceil(math.Log10(hi))
	if dhi <= dlo {
		dhi = dlo + 1
	}
	X := func(ms float64) float64 {
		return x0 + 20 + (cw-20)*(ms-float64(from.UnixMilli()))/float64(to.UnixMilli()-from.UnixMilli())
	}
	Y := func(v float64) float64 { return y0 + ch*(1-(math.Log10(v)-dlo)/(dhi-dlo)) }
	d.SetDrawColor(200, 200, 200)
	d.SetFont("Helvetica", "", 6)
	for e := dlo; e <= dhi; e++ {
		d.Line(x0+20, Y(math.Pow(10, e)), x0+cw, Y(math.Pow(10, e)))
		d.Text(x0, Y(math.Pow(10, e))+1, GroupDigits(math.Pow(10, e)))
	}
	d.SetDrawColor(161, 38, 13)
	for i, p := range []*float64{c.Class, c.Action, c.Alert} {
		if p != nil {
			d.SetDashPattern([][]float64{{}, {2, 1}, {0.6, 0.6}}[i], 0)
			d.Line(x0+20, Y(*p), x0+cw, Y(*p))
		}
	}
	d.SetDrawColor(31, 78, 156)
	for i, s := range c.Series {
		d.SetDashPattern([][]float64{{}, {1.5, 0.8}, {0.4, 0.6}, {2, 0.6, 0.4, 0.6}}[i%4], 0)
		for j := 1; j < len(s.Points); j++ {
			a, b := s.Points[j-1], s.Points[j]
			if a[1] > 0 && b[1] > 0 && b[0]-a[0] <= 2*3.6e6 {
				d.Line(X(a[0]), Y(a[1]), X(b[0]), Y(b[1]))
			}
		}
		d.Text(x0+20+float64(i)*40, y0+ch+5, d.text(s.Location+": "+[]string{"solid", "dashed", "dotted", "dash-dot"}[i%4]))
	}
	d.SetDashPattern([]float64{}, 0)
	d.SetDrawColor(0, 0, 0)
	d.SetXY(x0, y0+ch+8)
}

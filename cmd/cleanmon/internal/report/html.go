package report

import (
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"math"
	"strings"

	"cleanmon/classify"
)

//go:embed report.html.tmpl
var reportTemplate string

var reportTmpl = template.Must(template.New("report").Parse(reportTemplate))

// reportView is what the template sees.
type reportView struct {
	Certification
	V      view
	Map    template.HTML
	Charts []template.HTML
}

// WriteHTML renders the HTML report of o, certified against t: one file
// with no external assets that prints on A4 with page numbers.
func WriteHTML(w io.Writer, t classify.Target, o Certification) error {
	v, err := newView(t, o)
	if err != nil {
		return err
	}
	rv := reportView{Certification: o, V: v}
	if v.Map != nil {
		rv.Map = mapSVG(*v.Map)
	}
	for _, key := range o.Sizes {
		rv.Charts = append(rv.Charts, sizeChart(o.Report, key))
	}
	return reportTmpl.Execute(w, rv)
}

// mapSVG draws the zone as a rectangle to scale with each location at its
// coordinates. Marks differ in shape as well as tone so the map reads in
// monochrome.
func mapSVG(m mapView) template.HTML {
	const maxW, maxH, pad = 640.0, 360.0, 34.0
	scale := math.Min((maxW-2*pad)/m.LengthM, (maxH-2*pad)/m.WidthM)
	w, h := m.LengthM*scale+2*pad, m.WidthM*scale+2*pad
	esc := template.HTMLEscapeString
	var b strings.Builder
	fmt.Fprintf(&b, `<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 %.1f %.1f" width="%.0f" height="%.0f" role="img" aria-label="map of the sampling locations">`, w, h, w, h)
	fmt.Fprintf(&b, `<rect x="%g" y="%g" width="%.1f" height="%.1f" class="room"/>`, pad, pad, m.LengthM*scale, m.WidthM*scale)
	fmt.Fprintf(&b, `<text x="%g" y="%g" class="ax">0</text><text x="%.1f" y="%g" class="ax" text-anchor="end">x %s m</text><text x="%g" y="%.1f" class="ax" text-anchor="end">y %s m</text>`,
		pad-8, pad-6, pad+m.LengthM*scale, pad-6, fmtM(m.LengthM), pad-4, pad+m.WidthM*scale, fmtM(m.WidthM))
	for _, p := range m.Points {
		cx, cy := pad+p.XM*scale, pad+p.YM*scale
		title := fmt.Sprintf("%s (%.1f, %.1f) m: %s", p.ID, p.XM, p.YM, p.Status)
		switch p.Status {
		case "over":
			fmt.Fprintf(&b, `<rect x="%.1f" y="%.1f" width="11" height="11" class="over"><title>%s</title></rect>`, cx-5.5, cy-5.5, esc(title))
		case "within":
			fmt.Fprintf(&b, `<circle cx="%.1f" cy="%.1f" r="5.5" class="ok"><title>%s</title></circle>`, cx, cy, esc(title))
		default:
			fmt.Fprintf(&b, `<circle cx="%.1f" cy="%.1f" r="5.5" class="nj"><title>%s</title></circle>`, cx, cy, esc(title))
		}
		fmt.Fprintf(&b, `<text x="%.1f" y="%.1f" class="ax" text-anchor="middle">%s</text>`, cx, cy-9, esc(p.ID))
	}
	b.WriteString(`</svg>`)
	return template.HTML(b.String())
}

func fmtM(v float64) string { return classify.FormatSize(math.Round(v*10) / 10) }

// sizeChart draws, for one size, every location mean as a mark on a log
// axis against the limit line (and the UCL where the edition uses it).
// Marks differ in shape as well as tone so the chart reads in monochrome:
// a filled circle is within the limit, a hollow square is over it.
func sizeChart(r classify.Report, key string) template.HTML {
	const W, H, left, right, top, bottom = 420.0, 230.0, 64.0, 16.0, 28.0, 46.0
	var vals []float64
	for _, l := range r.Locations {
		vals = append(vals, l.MeanPerM3[key])
	}
	lim := r.LimitsPerM3[key]
	ucl, hasUCL := r.UCL95PerM3[key]
	lo, hi := math.Inf(1), math.Inf(-1)
	consider := func(x float64) {
		if x > 0 {
			lo, hi = math.Min(lo, x), math.Max(hi, x)
		}
	}
	for _, x := range vals {
		consider(x)
	}
	if lim != nil {
		consider(*lim)
	}
	if hasUCL {
		consider(ucl)
	}
	if math.IsInf(lo, 1) {
		lo, hi = 1, 10
	}
	dlo, dhi := math.Floor(math.Log10(lo)), math.Ceil(math.Log10(hi))
	if dhi <= dlo {
		dhi = dlo + 1
	}
	plotH := H - top - bottom
	y := func(x float64) float64 {
		if x <= 0 {
			return top + plotH // zero counts sit on the floor of the axis
		}
		return top + plotH*(1-(math.Log10(x)-dlo)/(dhi-dlo))
	}
	esc := template.HTMLEscapeString
	var b strings.Builder
	fmt.Fprintf(&b, `<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 %g %g" width="%g" height="%g" role="img" aria-label="location means at %s µm against the limit">`, W, H, W, H, esc(key))
	fmt.Fprintf(&b, `<text x="%g" y="16" class="ct">≥%s µm, particles/m³ (log scale)</text>`, left, esc(key))
	for d := dlo; d <= dhi; d++ {
		yy := y(math.Pow(10, d))
		fmt.Fprintf(&b, `<line x1="%g" x2="%g" y1="%.1f" y2="%.1f" class="grid"/><text x="%g" y="%.1f" class="ax" text-anchor="end">1e%d</text>`, left, W-right, yy, yy, left-6, yy+4, int(d))
	}
	if lim != nil {
		yy := y(*lim)
		fmt.Fprintf(&b, `<line x1="%g" x2="%g" y1="%.1f" y2="%.1f" class="lim"/><text x="%g" y="%.1f" class="ax" text-anchor="end">limit %s</text>`, left, W-right, yy, yy, W-right, yy-5, GroupDigits(*lim))
	}
	if hasUCL {
		yy := y(ucl)
		fmt.Fprintf(&b, `<line x1="%g" x2="%g" y1="%.1f" y2="%.1f" class="ucl"/><text x="%g" y="%.1f" class="ax">95%% UCL %s</text>`, left, W-right, yy, yy, left+4, yy-5, GroupDigits(round1(ucl)))
	}
	n := len(r.Locations)
	step := (W - left - right) / float64(n)
	for i, l := range r.Locations {
		cx := left + step*(float64(i)+0.5)
		cy := y(l.MeanPerM3[key])
		over := lim != nil && l.MeanPerM3[key] > *lim
		if over {
			fmt.Fprintf(&b, `<rect x="%.1f" y="%.1f" width="10" height="10" class="over"><title>%s: %s /m³, over the limit</title></rect>`, cx-5, cy-5, esc(l.ID), num(l.MeanPerM3[key]))
		} else {
			fmt.Fprintf(&b, `<circle cx="%.1f" cy="%.1f" r="5" class="ok"><title>%s: %s /m³</title></circle>`, cx, cy, esc(l.ID), num(l.MeanPerM3[key]))
		}
		if n <= 30 {
			fmt.Fprintf(&b, `<text x="%.1f" y="%g" class="ax" text-anchor="middle">%s</text>`, cx, H-bottom+16, esc(l.ID))
		}
	}
	b.WriteString(`</svg>`)
	return template.HTML(b.String())
}

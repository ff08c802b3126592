package report

import (
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"github.com/go-pdf/fpdf"

	"cleanmon/classify"
)

// The PDF is drawn with github.com/go-pdf/fpdf: pure Go (no cgo, no
// outside program), the maintained fork of the long-used gofpdf, and able
// to draw the location map with its own primitives. Its core fonts are
// Latin-1 (cp1252): the few signs outside it are written in ASCII.
var pdfSigns = strings.NewReplacer("≥", ">=", "≤", "<=", "−", "-", "→", "->", "✔", "", "✖", "")

// pdfDoc is the PDF under construction with the page geometry it needs.
type pdfDoc struct {
	f           *fpdf.Fpdf
	tr          func(string) string
	pageH       float64
	bottom      float64
	left, textW float64
}

// WritePDF renders the printable PDF report of o, certified against t:
// A4, the report identifier and "page x/y" on every page, no heading left
// alone at a page foot, table headers repeated on each page.
func WritePDF(w io.Writer, t classify.Target, o Certification) error {
	v, err := newView(t, o)
	if err != nil {
		return err
	}
	f := fpdf.New("P", "mm", "A4", "")
	f.SetCompression(false) // text stays greppable; the reports are small
	f.SetCreationDate(time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC))
	f.SetModificationDate(time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC))
	f.SetMargins(14, 14, 14)
	f.SetAutoPageBreak(true, 18)
	f.AliasNbPages("{nb}")
	tr := f.UnicodeTranslatorFromDescriptor("")
	d := &pdfDoc{f: f, tr: func(s string) string { return tr(pdfSigns.Replace(s)) }}
	_, d.pageH = f.GetPageSize()
	_, d.bottom = f.GetAutoPageBreak()
	pw, _ := f.GetPageSize()
	d.left, d.textW = 14, pw-28
	f.SetTitle("Cleanroom classification report "+v.ID, true)
	f.SetCreator("cleanmon", true)
	f.SetFooterFunc(func() {
		f.SetY(-13)
		f.SetFont("Helvetica", "", 8)
		f.CellFormat(d.textW/2, 5, d.tr("Report "+v.ID+" · "+v.Designation), "", 0, "L", false, 0, "")
		f.CellFormat(d.textW/2, 5, fmt.Sprintf("page %d/{nb}", f.PageNo()), "", 0, "R", false, 0, "")
	})
	f.AddPage()
	d.front(v)
	d.summary(v)
	d.mapSection(v)
	d.instruments(v)
	d.appendix(v)
	d.closing(v)
	if err := f.Error(); err != nil {
		return fmt.Errorf("report: PDF: %w", err)
	}
	return f.Output(w)
}

// need starts a new page unless h mm fit above the bottom margin.
func (d *pdfDoc) need(h float64) {
	if d.f.GetY()+h > d.pageH-d.bottom {
		d.f.AddPage()
	}
}

// heading keeps a heading with at least the next few lines.
func (d *pdfDoc) heading(s string) {
	d.need(28)
	d.f.Ln(3)
	d.f.SetFont("Helvetica", "B", 11.5)
	d.f.CellFormat(d.textW, 7, d.tr(s), "B", 1, "L", false, 0, "")
	d.f.Ln(1.5)
	d.f.SetFont("Helvetica", "", 9)
}

func (d *pdfDoc) para(s string) {
	d.f.SetFont("Helvetica", "", 9)
	d.f.MultiCell(d.textW, 4.4, d.tr(s), "", "L", false)
}

func (d *pdfDoc) list(items []string) {
	if len(items) == 0 {
		d.para("None.")
		return
	}
	for i, it := range items {
		d.para(fmt.Sprintf("%d. %s", i+1, it))
	}
}

func (d *pdfDoc) front(v view) {
	f := d.f
	f.SetFont("Helvetica", "B", 16)
	f.CellFormat(d.textW, 9, d.tr("Cleanroom classification report"), "", 1, "L", false, 0, "")
	f.SetFont("Helvetica", "", 10)
	f.CellFormat(d.textW, 6, d.tr("Report "+v.ID), "", 1, "L", false, 0, "")
	f.Ln(2)
	for _, m := range v.Meta {
		f.SetFont("Helvetica", "B", 9)
		y := f.GetY()
		f.CellFormat(40, 4.6, d.tr(m.Label), "", 0, "L", false, 0, "")
		f.SetFont("Helvetica", "", 9)
		f.SetXY(d.left+40, y)
		f.MultiCell(d.textW-40, 4.6, d.tr(m.Value), "", "L", false)
	}
	d.heading("Result")
	f.SetFont("Helvetica", "B", 14)
	f.SetLineWidth(0.6)
	f.CellFormat(50, 10, d.tr("Verdict: "+v.Verdict), "1", 1, "C", false, 0, "")
	f.SetLineWidth(0.2)
	f.Ln(2)
	d.para("Achieved class at the considered sizes: " + v.Achieved + ".")
	f.Ln(1)
	f.SetFont("Helvetica", "B", 9)
	f.CellFormat(d.textW, 5, "Problems", "", 1, "L", false, 0, "")
	d.list(v.Problems)
	f.SetFont("Helvetica", "B", 9)
	f.CellFormat(d.textW, 5, "Departures from the plan or the method", "", 1, "L", false, 0, "")
	d.list(v.Departures)
	if len(v.Warnings) > 0 {
		f.SetFont("Helvetica", "B", 9)
		f.CellFormat(d.textW, 5, "Warnings", "", 1, "L", false, 0, "")
		d.list(v.Warnings)
	}
}

// table draws rows under a header that is repeated on every page the
// table runs onto.
func (d *pdfDoc) table(widths []float64, head []string, rows [][]string, size float64) {
	f := d.f
	const h = 4.4
	drawHead := func() {
		f.SetFont("Helvetica", "B", size)
		f.SetFillColor(235, 239, 242)
		for i, c := range head {
			f.CellFormat(widths[i], h+0.6, d.tr(c), "1", 0, "C", true, 0, "")
		}
		f.Ln(-1)
		f.SetFont("Helvetica", "", size)
	}
	d.need(3 * h)
	drawHead()
	for _, r := range rows {
		if f.GetY()+h > d.pageH-d.bottom {
			f.AddPage()
			drawHead()
		}
		for i, c := range r {
			align := "R"
			if i == 0 {
				align = "L"
			}
			f.CellFormat(widths[i], h, d.tr(c), "1", 0, align, false, 0, "")
		}
		f.Ln(-1)
	}
}

func (d *pdfDoc) summary(v view) {
	d.heading("Summary by location")
	d.para("The mean of the samples' concentrations is judged. Pooled (all counts over all air) and the exact Poisson 95 % upper bound are informative only.")
	d.f.Ln(1)
	var rows [][]string
	for _, r := range v.Summary {
		rows = append(rows, []string{r.Location, pos(r), r.Samples, r.Volume, r.Size + " µm", r.Limit, r.Mean, r.Pooled, r.Upper, r.Result})
	}
	d.table([]float64{17, 19, 13, 16, 16, 20, 20, 21, 21, 19},
		[]string{"Location", "x, y m", "Samples", "Volume L", "Size", "Limit /m³", "Mean /m³", "Pooled inf.", "Upper inf.", "Result"}, rows, 7.5)
	if v.UCL != "" {
		d.f.Ln(1)
		d.para(v.UCL + ".")
	}
	if len(v.Sequential) > 0 {
		d.heading("Sequential sampling")
		for _, s := range v.Sequential {
			d.para(s)
		}
	}
}

func (d *pdfDoc) mapSection(v view) {
	d.heading("Location map")
	if v.Map == nil {
		d.para(v.MapNote)
		return
	}
	m := *v.Map
	const maxH = 95.0
	scale := math.Min((d.textW-20)/m.LengthM, maxH/m.WidthM)
	d.need(m.WidthM*scale + 24)
	f := d.f
	x0, y0 := d.left+10, f.GetY()+6
	f.SetDrawColor(29, 35, 39)
	f.Rect(x0, y0, m.LengthM*scale, m.WidthM*scale, "D")
	f.SetFont("Helvetica", "", 7)
	f.Text(x0-3, y0-1.5, "0")
	f.Text(x0+m.LengthM*scale-16, y0-1.5, d.tr("x "+fmtM(m.LengthM)+" m"))
	f.Text(x0-9, y0+m.WidthM*scale, d.tr("y "+fmtM(m.WidthM)))
	for _, p := range m.Points {
		cx, cy := x0+p.XM*scale, y0+p.YM*scale
		switch p.Status {
		case "over":
			f.SetLineWidth(0.6)
			f.Rect(cx-1.8, cy-1.8, 3.6, 3.6, "D")
			f.SetLineWidth(0.2)
		case "within":
			f.SetFillColor(31, 95, 139)
			f.Circle(cx, cy, 1.6, "F")
		default:
			f.Circle(cx, cy, 1.6, "D")
		}
		f.Text(cx-f.GetStringWidth(p.ID)/2, cy-2.8, d.tr(p.ID))
	}
	f.SetY(y0 + m.WidthM*scale + 4)
	d.para(v.MapNote + " Filled circle: within the limit; hollow square: over the limit; hollow circle: not judged.")
}

func (d *pdfDoc) instruments(v view) {
	d.heading("Instruments")
	if len(v.Instruments) > 0 {
		var rows [][]string
		for _, in := range v.Instruments {
			rows = append(rows, []string{in.ID, in.Model, in.Serial, in.Due, in.Status})
		}
		d.table([]float64{24, 40, 28, 26, 64}, []string{"Counter", "Model", "Serial", "Calibration due", "Status"}, rows, 7.5)
	}
	if v.NoInstr != "" {
		d.para(v.NoInstr)
	}
}

func (d *pdfDoc) appendix(v view) {
	d.heading("Appendix: every sample")
	d.para("Counts are cumulative (particles at or above the size). * minutes from the volume and the counter's flow rather than a recorded duration.")
	d.f.Ln(1)
	head := []string{"Location", "Sample", "Time UTC", "Counter", "Vol. L", "Min"}
	widths := []float64{16, 18, 30, 18, 14, 12}
	rest := (d.textW - 108) / float64(2*len(v.Sizes))
	for _, s := range v.Sizes {
		head = append(head, ">="+s+" n")
		widths = append(widths, rest)
	}
	for _, s := range v.Sizes {
		head = append(head, ">="+s+" /m³")
		widths = append(widths, rest)
	}
	var rows [][]string
	for _, s := range v.Samples {
		r := []string{s.Location, s.Sample, s.Time, s.Counter, s.Volume, s.Minutes}
		r = append(append(r, s.Counts...), s.PerM3...)
		rows = append(rows, r)
	}
	d.table(widths, head, rows, 7)
}

func (d *pdfDoc) closing(v view) {
	f := d.f
	d.need(60)
	f.Ln(5)
	f.SetFillColor(244, 246, 247)
	f.SetFont("Helvetica", "", 9)
	f.MultiCell(d.textW, 4.6, d.tr(v.Caution), "L", "L", true)
	f.Ln(12)
	half := d.textW/2 - 5
	y := f.GetY()
	for i, s := range v.Signatures {
		x := d.left + float64(i)*(half+10)
		f.SetXY(x, y)
		if s.Signed != "" {
			f.MultiCell(half, 4.2, d.tr(s.Label+": "+s.Signed), "T", "L", false)
			continue
		}
		f.Line(x, y, x+half, y)
		f.SetXY(x, y+1)
		f.CellFormat(half, 4.6, d.tr(s.Label+" (name, signature, date)"), "", 0, "L", false, 0, "")
	}
	f.SetXY(d.left, y+16)
	d.para("Report " + v.ID + ": the first 12 hex digits of the SHA-256 of this certification's JSON report.")
}

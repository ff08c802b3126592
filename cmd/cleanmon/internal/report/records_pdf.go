package report

import (
	"fmt"
	"io"
	"strings"

	"github.com/go-pdf/fpdf"

	"cleanmon/classify"
)

// The PDF forms of the exposure and trend reports, drawn with fpdf's core
// fonts: nothing is embedded, and a PDF reader shows the same text as the
// HTML form.

// recordPDF wraps an fpdf document with the text translation the core fonts
// need (they are Windows-1252: "µ", "³" and "·" exist, "≥" and "→" do not).
type recordPDF struct {
	*fpdf.Fpdf
	tr func(string) string
}

var pdfReplacer = strings.NewReplacer("≥", ">=", "→", "->", "\u2009", " ", "—", "-", "…", "...")

func newRecordPDF(title string) *recordPDF {
	f := fpdf.New("P", "mm", "A4", "")
	f.SetTitle(title, true)
	f.SetCreator("cleanmon", true)
	f.SetMargins(15, 15, 15)
	f.SetAutoPageBreak(true, 15)
	f.AddPage()
	d := &recordPDF{Fpdf: f, tr: f.UnicodeTranslatorFromDescriptor("")}
	d.SetFont("Helvetica", "B", 15)
	d.line(title, 8)
	return d
}

func (d *recordPDF) text(s string) string { return d.tr(pdfReplacer.Replace(s)) }

// line writes one paragraph of wrapped text at height h per line.
func (d *recordPDF) line(s string, h float64) { d.MultiCell(0, h, d.text(s), "", "L", false) }

func (d *recordPDF) heading(s string) {
	d.Ln(3)
	d.SetFont("Helvetica", "B", 11)
	d.line(s, 6)
	d.SetFont("Helvetica", "", 9)
}

func (d *recordPDF) para(s string) {
	d.SetFont("Helvetica", "", 9)
	d.line(s, 4.5)
}

// table draws a header and rows with the given column widths (mm).
func (d *recordPDF) table(widths []float64, head []string, rows [][]string) {
	d.SetFont("Helvetica", "B", 8)
	d.SetFillColor(238, 241, 243)
	for i, h := range head {
		d.CellFormat(widths[i], 5.5, d.text(h), "1", 0, "L", true, 0, "")
	}
	d.Ln(-1)
	d.SetFont("Helvetica", "", 8)
	for _, r := range rows {
		for i, c := range r {
			d.CellFormat(widths[i], 5, d.text(c), "1", 0, "L", false, 0, "")
		}
		d.Ln(-1)
	}
}

// signature draws the lines a reviewer fills in, after the caution.
func (d *recordPDF) signature(caution string) {
	d.Ln(4)
	d.SetFont("Helvetica", "I", 9)
	d.line(caution, 4.5)
	d.Ln(12)
	d.SetFont("Helvetica", "", 9)
	x, y := d.GetX(), d.GetY()
	for i, label := range []string{"Reviewed by (QA), name", "Date", "Signature"} {
		x0 := x + float64(i)*62
		d.Line(x0, y, x0+56, y)
		d.SetXY(x0, y+1)
		d.CellFormat(56, 5, d.text(label), "", 0, "L", false, 0, "")
	}
	d.Ln(8)
}

func (d *recordPDF) finish(w io.Writer) error {
	if err := d.Error(); err != nil {
		return err
	}
	return d.Output(w)
}

// WriteExposurePDF writes the exposure report as PDF.
func WriteExposurePDF(w io.Writer, e Exposure) error {
	d := newRecordPDF("Exposure of production run " + e.Run.ID)
	d.para(fmt.Sprintf("Site: %s\nZone: %s (%s), %s\nProduct / lot: %s / %s\nRun: %s - %s (recorded by %s)\nFigures up to %s; generated %s",
		e.Site, e.ZoneName, e.Run.Zone, e.Target, dash(e.Run.Product), dash(e.Run.Lot), stamp(e.Run.Start), e.Run.endText(), e.Run.RecordedBy,
		stamp(e.Until), stamp(e.Generated)))
	d.heading(fmt.Sprintf("Alarms that overlapped the run (%d, %d about particles)", len(e.Alarms), e.Excursions))
	if len(e.Alarms) == 0 {
		d.para("No alarm of the zone overlapped the run.")
	} else {
		var rows [][]string
		for _, a := range e.Alarms {
			rows = append(rows, []string{a.Level, a.Kind, dash(a.Location), sizeText(a.SizeUM), stamp(a.Since), clearedText(a.Cleared), GroupDigits(round1(a.Peak))})
		}
		d.table([]float64{14, 26, 18, 18, 37, 37, 30}, []string{"Level", "Kind", "Where", "Size", "Since", "Cleared", "Peak"}, rows)
	}
	d.heading("Time by attention level")
	var rows [][]string
	for _, r := range LevelRows(e.TimeByLevel) {
		rows = append(rows, []string{r.Level, r.Duration.String(), fmt.Sprintf("%.1f %%", 100*r.Share)})
	}
	d.table([]float64{40, 40, 30}, []string{"Level", "Time", "Share"}, rows)
	d.heading("Peak concentration")
	rows = nil
	for _, p := range e.Peaks {
		rows = append(rows, []string{"≥" + classify.FormatSize(p.SizeUM) + " µm", GroupDigits(round1(p.PerM3)) + " /m³", p.Location, stamp(p.Time)})
	}
	if len(rows) == 0 {
		d.para("No trusted reading during the run: nothing is known of its air.")
	} else {
		d.table([]float64{25, 40, 30, 45}, []string{"Size", "Peak", "Location", "Time"}, rows)
	}
	for _, n := range e.Notes {
		d.para("Note: " + n)
	}
	d.signature(Caution + " " + e.Caution)
	return d.finish(w)
}

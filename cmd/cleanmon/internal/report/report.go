// Package report renders certifications for people to keep: the text,
// HTML and PDF reports of `cleanmon certify` and of the pages' report
// download, from the verdict classify computed. It computes no verdict
// itself and imports no package of the project but classify.
package report

import (
	"bytes"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"slices"
	"strings"
	"time"

	"cleanmon/classify"
)

// Certification is the certify JSON: the classify report (its keys at top
// level) with the report's own context.
type Certification struct {
	classify.Report
	Site          string `json:"site,omitempty"`
	Zone          string `json:"zone,omitempty"`
	Date          string `json:"date,omitempty"`
	Certifier     string `json:"certifier,omitempty"`
	Organisation  string `json:"organisation,omitempty"`
	Operator      string `json:"operator,omitempty"`
	SamplesFile   string `json:"samples_file,omitempty"`
	SamplesSHA256 string `json:"samples_sha256,omitempty"`
	Differential  bool   `json:"differential_counts"`
	// Room is the rectangle the location map is drawn in; nil when neither
	// its size nor any coordinate is known.
	Room *Room `json:"room,omitempty"`
	// PositionsFromPlan is set when some locations had no coordinates of
	// their own and were placed at the plan layout's section centres.
	PositionsFromPlan bool `json:"positions_from_plan,omitempty"`
	// Signatures are electronic signatures of the report identifier; they
	// are shown in the signature block and are not part of the JSON.
	Signatures []Signature `json:"-"`
}

// ErrFormat reports a report format that is not one of Formats.
var ErrFormat = errors.New("unknown report format")

// Formats are the formats Write renders.
var Formats = []string{"text", "json", "html", "pdf"}

// CheckFormat accepts one of Formats.
func CheckFormat(format string) error {
	if !slices.Contains(Formats, format) {
		return fmt.Errorf("%w %q (want %s)", ErrFormat, format, strings.Join(Formats, ", "))
	}
	return nil
}

// Write renders o, certified against t, in a format of Formats.
func Write(w io.Writer, format string, t classify.Target, o Certification) error {
	switch format {
	case "json":
		b, err := JSON(o)
		if err == nil {
			_, err = w.Write(b)
		}
		return err
	case "html":
		return WriteHTML(w, t, o)
	case "pdf":
		return WritePDF(w, t, o)
	case "text":
		return WriteText(w, t, o)
	}
	return CheckFormat(format)
}

// Room is the zone's floor rectangle in metres, x along its length.
type Room struct {
	LengthM float64 `json:"length_m"`
	WidthM  float64 `json:"width_m"`
}

// JSON is the certification as `certify --format json` writes it. Its
// bytes are what the report identifier is computed from, so every format
// of one certification carries the same identifier.
func JSON(o Certification) ([]byte, error) {
	var b bytes.Buffer
	enc := json.NewEncoder(&b)
	enc.SetIndent("", "  ")
	if err := enc.Encode(o); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

// ID is the report identifier: "CM-" and the first 12 hex digits of the
// SHA-256 of the JSON report. Anyone holding the JSON file can recompute
// it (sha256sum), so a printed page is tied to the data it came from.
func ID(o Certification) (string, error) {
	b, err := JSON(o)
	if err != nil {
		return "", err
	}
	sum := sha256.Sum256(b)
	return "CM-" + strings.ToUpper(hex.EncodeToString(sum[:6])), nil
}

// GroupDigits writes a whole number with thin groups of three (35 200 000),
// the way the standards print their tables; fractions keep one decimal.
func GroupDigits(v float64) string {
	s := fmt.Sprintf("%.0f", v)
	if v < 100 && v != float64(int64(v)) {
		return fmt.Sprintf("%.1f", v)
	}
	var b strings.Builder
	for i, r := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(' ')
		}
		b.WriteRune(r)
	}
	return b.String()
}

// CSP is the content security policy of a downloaded HTML report: nothing
// runs, nothing loads, and the one style block of the template applies.
var CSP = "default-src 'none'; style-src " + styleHashes(reportTemplate) +
	"; img-src data:; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"

// styleHashes returns the CSP hash sources of the <style> blocks of a
// document, or 'none' when it has none.
func styleHashes(doc string) string {
	var out []string
	for {
		_, rest, ok := strings.Cut(doc, "<style>")
		if !ok {
			break
		}
		css, after, ok := strings.Cut(rest, "</style>")
		if !ok {
			break
		}
		sum := sha256.Sum256([]byte(css))
		out = append(out, "'sha256-"+base64.StdEncoding.EncodeToString(sum[:])+"'")
		doc = after
	}
	if len(out) == 0 {
		return "'none'"
	}
	return strings.Join(out, " ")
}

// Signature is an electronic signature shown in the report's signature
// block in place of the empty line of its meaning ("performed",
// "reviewed" or "approved"). It signs the report identifier, which is why
// signatures are not part of the JSON the identifier is computed from.
// Who may sign, and how, is decided by whoever makes the Signature.
type Signature struct {
	Meaning  string    `json:"meaning"`
	FullName string    `json:"full_name"`
	UserName string    `json:"user"`
	Time     time.Time `json:"time"`
	Method   string    `json:"method"`
	SHA256   string    `json:"sha256"`
}

// signatureLines are the lines of the signature block: a signature where
// one is given for the meaning, an empty line for a wet signature
// otherwise.
func signatureLines(sigs []Signature) []sigLine {
	out := []sigLine{{Label: "Performed by", Meaning: "performed"}, {Label: "Approved by", Meaning: "approved"}}
	for i := range out {
		for _, s := range sigs {
			if s.Meaning == out[i].Meaning {
				out[i].Signed = fmt.Sprintf("%s (%s), signed electronically %s UTC by %s, SHA-256 %s",
					s.FullName, s.UserName, s.Time.UTC().Format("2006-01-02 15:04:05"), s.Method, s.SHA256)
			}
		}
	}
	return out
}

type sigLine struct{ Label, Meaning, Signed string }

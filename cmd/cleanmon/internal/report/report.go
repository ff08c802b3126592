// Package report renders certifications for people to keep: the text and
// HTML reports of `cleanmon certify` and of the pages' report download,
// from the verdict classify computed. It computes no verdict itself and
// imports no package of the project but classify.
package report

import (
	"crypto/sha256"
	"encoding/base64"
	"fmt"
	"strings"

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
	SamplesFile   string `json:"samples_file,omitempty"`
	SamplesSHA256 string `json:"samples_sha256,omitempty"`
	Differential  bool   `json:"differential_counts"`
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

package report

import (
	"bytes"
	"html"
)

// SignaturesHTML is the block of electronic signatures printed on a
// report, one line each (who, meaning, when, SHA-256 of what was signed),
// or a line saying there is none yet, so an unsigned copy cannot pass for
// a signed one. It uses no style of its own: the report's policy allows
// only its own style block.
func SignaturesHTML(lines []string) []byte {
	var b bytes.Buffer
	b.WriteString("<section id=\"signatures\"><h2>Electronic signatures</h2>")
	if len(lines) == 0 {
		b.WriteString("<p>Not signed: no electronic signature has been given for this report.</p>")
	} else {
		b.WriteString("<ul>")
		for _, l := range lines {
			b.WriteString("<li>" + html.EscapeString(l) + "</li>")
		}
		b.WriteString("</ul>")
	}
	b.WriteString("</section>\n")
	return b.Bytes()
}

// WithSignatures puts the signatures block at the end of a report's body.
func WithSignatures(doc []byte, lines []string) []byte {
	block := SignaturesHTML(lines)
	i := bytes.LastIndex(doc, []byte("</body>"))
	if i < 0 {
		return append(doc, block...)
	}
	out := make([]byte, 0, len(doc)+len(block))
	out = append(out, doc[:i]...)
	out = append(out, block...)
	return append(out, doc[i:]...)
}

package classify

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// ErrMacro reports a macroparticle descriptor that cannot be read.
var ErrMacro = errors.New("classify: bad macroparticle descriptor")

// Macro is the macroparticle descriptor of ISO 14644-1:2015 Annex C,
// written "ISO M (a; b); c": a the maximum concentration in particles/m³,
// b the equivalent diameter (a threshold such as ">5 µm" or a range "10 µm
// to 20 µm"), c the measurement method. Macroparticles are those above
// 5 µm (Annex C, from memory).
type Macro struct {
	PerM3  float64 `json:"per_m3"`
	Op     string  `json:"op,omitempty"` // ">" or "≥" before a threshold; "" for a range
	MinUM  float64 `json:"min_um"`
	MaxUM  float64 `json:"max_um,omitempty"` // 0 for a threshold
	Method string  `json:"method"`
}

// ParseMacro reads "ISO M (a; b); c"; the "ISO " prefix is optional and
// spaces in a (thousands separated as the standard prints them, "10 000")
// are allowed. A decimal comma is refused: "1,000" would be ambiguous.
func ParseMacro(s string) (Macro, error) {
	bad := func(format string, a ...any) (Macro, error) {
		return Macro{}, fmt.Errorf("%w: %q: %s", ErrMacro, s, fmt.Sprintf(format, a...))
	}
	t := strings.TrimSpace(s)
	t = strings.TrimSpace(strings.TrimPrefix(t, "ISO"))
	if !strings.HasPrefix(t, "M") {
		return bad("want the form ISO M (a; b); c")
	}
	t = strings.TrimSpace(t[1:])
	open, closing := strings.Index(t, "("), strings.Index(t, ")")
	if open != 0 || closing < 0 {
		return bad("want (a; b) after M")
	}
	inner, rest := t[1:closing], strings.TrimSpace(t[closing+1:])
	parts := strings.Split(inner, ";")
	if len(parts) != 2 {
		return bad("want two fields, a; b, inside the brackets")
	}
	if !strings.HasPrefix(rest, ";") || strings.TrimSpace(rest[1:]) == "" {
		return bad("want ; and the measurement method after the brackets")
	}
	var m Macro
	m.Method = strings.TrimSpace(rest[1:])
	a := strings.NewReplacer(" ", "", "\u202f", "", "\u00a0", "", "\u2009", "").Replace(parts[0])
	if strings.Contains(a, ",") {
		return bad("concentration %q: write it without commas (10 000 or 10000)", strings.TrimSpace(parts[0]))
	}
	v, err := strconv.ParseFloat(a, 64)
	if err != nil || !(v > 0) || math.IsInf(v, 0) {
		return bad("concentration %q is not a positive number of particles/m³", strings.TrimSpace(parts[0]))
	}
	m.PerM3 = v
	if err := m.parseDiameter(parts[1]); err != nil {
		return bad("%v", err)
	}
	return m, nil
}

func (m *Macro) parseDiameter(b string) error {
	t := strings.TrimSpace(b)
	num := func(x string) (float64, error) {
		x = strings.TrimSpace(x)
		for _, suf := range []string{"µm", "μm", "um"} {
			x = strings.TrimSpace(strings.TrimSuffix(x, suf))
		}
		v, err := strconv.ParseFloat(x, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return 0, fmt.Errorf("diameter %q is not a size in µm", strings.TrimSpace(b))
		}
		return v, nil
	}
	var err error
	if lo, hi, ok := strings.Cut(t, " to "); ok {
		if m.MinUM, err = num(lo); err != nil {
			return err
		}
		if m.MaxUM, err = num(hi); err != nil {
			return err
		}
		if !(m.MaxUM > m.MinUM) {
			return fmt.Errorf("diameter range %q must run from the smaller size to the larger", t)
		}
	} else {
		for _, op := range []string{">=", "≥", ">"} {
			if strings.HasPrefix(t, op) {
				m.Op, t = op, t[len(op):]
				break
			}
		}
		if m.Op == ">=" {
			m.Op = "≥"
		}
		if m.MinUM, err = num(t); err != nil {
			return err
		}
	}
	if m.MinUM < 5 || (m.MinUM == 5 && m.Op != ">" && m.MaxUM == 0) {
		return fmt.Errorf("diameter %q: macroparticles are those above 5 µm", strings.TrimSpace(b))
	}
	return nil
}

// String writes the descriptor as the standard does: "ISO M (10 000; >5
// µm); time-of-flight aerosol spectrometer".
func (m Macro) String() string {
	var d string
	if m.MaxUM > 0 {
		d = FormatSize(m.MinUM) + " µm to " + FormatSize(m.MaxUM) + " µm"
	} else {
		d = m.Op + FormatSize(m.MinUM) + " µm"
	}
	return fmt.Sprintf("ISO M (%s; %s); %s", groupThousands(m.PerM3), d, m.Method)
}

// groupThousands writes a number with a space between groups of three
// digits, as ISO standards print them.
func groupThousands(v float64) string {
	s := strconv.FormatFloat(v, 'f', -1, 64)
	intPart, frac, _ := strings.Cut(s, ".")
	var b strings.Builder
	for i, r := range intPart {
		if i > 0 && (len(intPart)-i)%3 == 0 {
			b.WriteByte(' ')
		}
		b.WriteRune(r)
	}
	if frac != "" {
		b.WriteString("." + frac)
	}
	return b.String()
}

package investigate

import (
	"fmt"
	"strconv"
	"strings"
	"time"
)

// span says a duration the way people on the floor do: "40 s", "2 min",
// "2 min 10 s", "1 h 5 min".
func span(d time.Duration) string {
	if d < 0 {
		d = -d
	}
	d = d.Round(time.Second)
	switch {
	case d < time.Minute:
		return fmt.Sprintf("%d s", int(d.Seconds()))
	case d < time.Hour:
		m, s := int(d/time.Minute), int((d%time.Minute)/time.Second)
		if s == 0 {
			return fmt.Sprintf("%d min", m)
		}
		return fmt.Sprintf("%d min %d s", m, s)
	}
	h, m := int(d/time.Hour), int((d%time.Hour)/time.Minute)
	if m == 0 {
		return fmt.Sprintf("%d h", h)
	}
	return fmt.Sprintf("%d h %d min", h, m)
}

// relative places an event against the rise: "40 s before the rise at
// asm-2", "at the rise at asm-2", "1 min after the rise at asm-2".
func relative(lead time.Duration, where string) string {
	at := "the rise"
	if where != "" {
		at += " at " + where
	}
	switch {
	case lead >= 5*time.Second:
		return span(lead) + " before " + at
	case lead <= -5*time.Second:
		return span(lead) + " after " + at
	}
	return "at " + at
}

// pa prints a pressure to 0.1 Pa, the resolution of a room DP sensor.
func pa(v float64) string {
	return strconv.FormatFloat(v, 'f', 1, 64)
}

// sig rounds v to 3 significant figures for a sentence.
func sig(v float64) string {
	s := strconv.FormatFloat(v, 'g', 3, 64)
	if strings.ContainsAny(s, "e") {
		return strconv.FormatFloat(v, 'f', 0, 64)
	}
	return s
}

// list joins names as "a", "a and b", "a, b and c".
func list(names []string) string {
	switch len(names) {
	case 0:
		return ""
	case 1:
		return names[0]
	}
	return strings.Join(names[:len(names)-1], ", ") + " and " + names[len(names)-1]
}

func clock(t time.Time) string { return t.UTC().Format("15:04:05") }

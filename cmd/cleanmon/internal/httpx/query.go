package httpx

import (
	"fmt"
	"net/http"
	"net/url"
	"time"
)

// defaultSpan is the range of a query that gives no from or to.
const defaultSpan = 24 * time.Hour

// QueryRange reads from and to (RFC 3339; default the 24 h before now). A
// bad value is answered here with a 400 naming the parameter.
func QueryRange(w http.ResponseWriter, r *http.Request, now time.Time) (from, to time.Time, ok bool) {
	from, to, field, msg := ParseRange(r.URL.Query(), now)
	if field != "" {
		WriteFieldError(w, field, msg)
		return from, to, false
	}
	return from, to, true
}

// ParseRange reads from and to out of q; a bad value gives the field at
// fault and what is wrong with it.
func ParseRange(q url.Values, now time.Time) (from, to time.Time, field, msg string) {
	parse := func(name string) (time.Time, bool, string) {
		v := q.Get(name)
		if v == "" {
			return time.Time{}, false, ""
		}
		t, err := time.Parse(time.RFC3339Nano, v)
		if err != nil {
			return time.Time{}, false, fmt.Sprintf("%q is not an RFC 3339 time such as 2026-03-02T10:00:00Z", v)
		}
		return t.UTC(), true, ""
	}
	from, hasFrom, bad := parse("from")
	if bad != "" {
		return from, to, "from", bad
	}
	to, hasTo, bad := parse("to")
	if bad != "" {
		return from, to, "to", bad
	}
	if !hasTo {
		to = now.UTC()
	}
	if !hasFrom {
		from = to.Add(-defaultSpan)
	}
	if !from.Before(to) {
		return from, to, "from", fmt.Sprintf("%s is not before to (%s)", from.Format(time.RFC3339), to.Format(time.RFC3339))
	}
	return from, to, "", ""
}

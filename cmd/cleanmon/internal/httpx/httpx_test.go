package httpx

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
)

// AppendFloat writes what encoding/json writes, checked against it.
func TestAppendFloat(t *testing.T) {
	for _, f := range []float64{0, 1, -2.5, 1e-7, 3.5e21, 123456.789, 1e20, 5e-324} {
		want, _ := json.Marshal(f)
		if got := AppendFloat(nil, f); !bytes.Equal(got, want) {
			t.Errorf("%v: %s, encoding/json %s", f, got, want)
		}
	}
	if got := string(AppendFloat(nil, math.NaN())); got != "null" {
		t.Errorf("NaN: %s", got)
	}
}

// The table picks the first rule that matches, through wrapping; what no
// rule names is the daemon's side failing, or a request out of time.
func TestTableStatus(t *testing.T) {
	errBad, errGone := errors.New("bad"), errors.New("gone")
	table := Table{{Err: errBad, Status: http.StatusBadRequest}, {Err: errGone, Status: http.StatusNotFound}}
	for _, c := range []struct {
		err  error
		want int
	}{
		{errBad, http.StatusBadRequest},
		{fmt.Errorf("reading: %w", errGone), http.StatusNotFound},
		{fmt.Errorf("scan: %w", context.DeadlineExceeded), http.StatusGatewayTimeout},
		{errors.New("disk"), http.StatusServiceUnavailable},
	} {
		if got := table.Status(c.err); got != c.want {
			t.Errorf("%v: %d, want %d", c.err, got, c.want)
		}
	}
}

// DecodeStrict refuses what a lenient decoder would let through, naming
// the field or the reason; the one JSON writer sets the same headers on
// every answer.
func TestDecodeStrict(t *testing.T) {
	for _, c := range []struct {
		body   string
		status int
		field  string
	}{
		{`{"state":"at-rest"}`, 0, ""},
		{`{"state":"at-rest","who":"x"}`, http.StatusBadRequest, "who"},
		{`{"state":"at-rest"} {}`, http.StatusBadRequest, ""},
		{`state=at-rest`, http.StatusBadRequest, ""},
		{`{"state":"` + strings.Repeat("x", 100) + `"}`, http.StatusRequestEntityTooLarge, ""},
	} {
		var v struct {
			State string `json:"state"`
		}
		rec := httptest.NewRecorder()
		ok := DecodeStrict(rec, httptest.NewRequest("PUT", "/", strings.NewReader(c.body)), 64, &v, "state")
		if ok != (c.status == 0) {
			t.Errorf("%s: ok %v", c.body, ok)
			continue
		}
		if ok {
			if v.State != "at-rest" {
				t.Errorf("%s: decoded %+v", c.body, v)
			}
			continue
		}
		var e ErrorBody
		if err := json.Unmarshal(rec.Body.Bytes(), &e); err != nil || rec.Code != c.status || e.Field != c.field || e.Error == "" {
			t.Errorf("%s: %d %s", c.body, rec.Code, rec.Body.String())
		}
		for k, want := range map[string]string{"Content-Type": "application/json", "Cache-Control": "no-store", "X-Content-Type-Options": "nosniff"} {
			if got := rec.Header().Get(k); got != want {
				t.Errorf("%s: %s %q", c.body, k, got)
			}
		}
	}
}

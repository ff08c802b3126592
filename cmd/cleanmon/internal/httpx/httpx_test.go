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

// A refusal is the one JSON error body with the common headers, closes
// the connection, and reads the rest of the body so the client can read
// the answer.
func TestWriteRefusal(t *testing.T) {
	body := strings.NewReader(strings.Repeat("x", 1<<20))
	rec := httptest.NewRecorder()
	WriteRefusal(rec, httptest.NewRequest("POST", "/", body), http.StatusRequestEntityTooLarge, ErrorBody{Error: "body larger than 64 bytes"})
	var e ErrorBody
	if err := json.Unmarshal(rec.Body.Bytes(), &e); err != nil || rec.Code != http.StatusRequestEntityTooLarge || e.Error == "" {
		t.Errorf("%d %s", rec.Code, rec.Body.String())
	}
	if body.Len() != 0 {
		t.Errorf("%d bytes of the refused body left unread", body.Len())
	}
	for k, want := range map[string]string{"Content-Type": "application/json", "Cache-Control": "no-store", "X-Content-Type-Options": "nosniff", "Connection": "close"} {
		if got := rec.Header().Get(k); got != want {
			t.Errorf("%s %q", k, got)
		}
	}
}

package web

import (
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"testing"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/site"
)

// TestUISiteClock: GET /ui/site names the site's time zone and its
// shifts, and cuts the current and the last shift on the site's clock.
func TestUISiteClock(t *testing.T) {
	cases := []struct {
		name, extra string
		now         time.Time
		zone        string
		cur, last   [2]string
	}{
		// Etc/GMT-3 is UTC+3 all year (the IANA database's sign is
		// inverted): 07:00Z is 10:00 on the site's clock, in the shift
		// that began at 06:00 (03:00Z).
		{"shifts on the site's clock", "time_zone: Etc/GMT-3\nshifts: [\"06:00\", \"14:00\", \"22:00\"]\n",
			time.Date(2026, 3, 2, 7, 0, 0, 0, time.UTC), "Etc/GMT-3",
			[2]string{"2026-03-02T03:00:00Z", "2026-03-02T11:00:00Z"}, [2]string{"2026-03-01T19:00:00Z", "2026-03-02T03:00:00Z"}},
		{"no clock configured: UTC days", "",
			time.Date(2026, 3, 2, 7, 0, 0, 0, time.UTC), "UTC",
			[2]string{"2026-03-02T00:00:00Z", "2026-03-03T00:00:00Z"}, [2]string{"2026-03-01T00:00:00Z", "2026-03-02T00:00:00Z"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg, err := site.Load("site.yaml", []byte(pageSite+"access: {open_reads: true}\n"+c.extra))
			if err != nil {
				t.Fatal(err)
			}
			auth, err := access.NewAuthorizer(cfg.Access, false)
			if err != nil {
				t.Fatal(err)
			}
			r := chi.NewRouter()
			New(Options{Site: cfg, Store: fakePressure{}, Certify: fakeCertifier{}, Access: auth, Log: slog.New(slog.NewTextHandler(io.Discard, nil)),
				Now: func() time.Time { return c.now }}).Register(r)
			d := &pageServer{t: t, h: r}
			code, _, body := d.do("GET", "/ui/site", "", "", nil)
			if code != http.StatusOK {
				t.Fatalf("%d %s", code, body)
			}
			var got struct {
				TimeZone  string   `json:"time_zone"`
				Shifts    []string `json:"shifts"`
				Shift     struct{ Start, End string }
				LastShift struct{ Start, End string } `json:"last_shift"`
			}
			if err := json.Unmarshal(body, &got); err != nil {
				t.Fatal(err)
			}
			if got.TimeZone != c.zone || got.Shifts == nil ||
				[2]string{got.Shift.Start, got.Shift.End} != c.cur || [2]string{got.LastShift.Start, got.LastShift.End} != c.last {
				t.Errorf("got %s", body)
			}
		})
	}
}

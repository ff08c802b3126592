package api

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/go-chi/chi/v5"
	"github.com/prometheus/common/model"

	"cleanmon/collector"
	"cleanmon/store"
)

// fakeEnv is the environment side of the API: the latest sample, and
// what a POST was handed.
type fakeEnv struct {
	latest    map[string]store.EnvSample
	gotCType  string
	gotLength int64
}

func (f *fakeEnv) PostEnvironment(_ context.Context, ctype string, n int64, body io.Reader) (collector.Result, error) {
	f.gotCType, f.gotLength = ctype, n
	io.Copy(io.Discard, body)
	return collector.Result{Accepted: 1}, nil
}
func (f *fakeEnv) ScanEnvironment(string, time.Time, time.Time, func(store.EnvSample) error) error {
	return nil
}
func (f *fakeEnv) ScanEnvironmentRollups(string, time.Duration, time.Time, time.Time, func(store.EnvRollup) error) error {
	return nil
}
func (f *fakeEnv) LatestEnvironment(id string) (store.EnvSample, bool, error) {
	e, ok := f.latest[id]
	return e, ok, nil
}

func f64(v float64) *float64 { return &v }

// TestEnvironmentStateFailSafe: a channel's state is ok only while its
// latest value is fresh and inside both bands; a stale value keeps its
// number but is unknown, a sensor with no sample is unknown, and a value
// outside the action band is action.
func TestEnvironmentStateFailSafe(t *testing.T) {
	band := func(lo, hi float64) *collector.EnvironmentBand {
		return &collector.EnvironmentBand{Low: f64(lo), High: f64(hi)}
	}
	env := &fakeEnv{latest: map[string]store.EnvSample{
		// th-fresh: 30 s old; 22.4 °C is beyond the action band's 22.
		"th-fresh": {Sensor: "th-fresh", Time: testNow.Add(-30 * time.Second), Has: store.EnvTemperature | store.EnvHumidity, TemperatureC: 22.4, HumidityPct: 45},
		// th-stale: four minutes old at a one-minute interval.
		"th-stale": {Sensor: "th-stale", Time: testNow.Add(-4 * time.Minute), Has: store.EnvTemperature | store.EnvHumidity, TemperatureC: 21, HumidityPct: 45},
	}}
	s := newTestServer(t, Options{EnvIngest: env, EnvStore: env})
	for _, id := range []string{"th-fresh", "th-stale", "th-none"} {
		s.cfg.Environment = append(s.cfg.Environment, collector.EnvironmentSensorConfig{ID: id, Zone: "hood", Kind: "temperature-humidity",
			Interval: model.Duration(time.Minute), TemperatureC: &collector.EnvironmentLimits{Action: band(20, 22)}, HumidityPct: &collector.EnvironmentLimits{Alert: band(41, 49), Action: band(40, 50)}})
	}
	r := chi.NewRouter()
	s.Register(r)
	rec := httptest.NewRecorder()
	r.ServeHTTP(rec, httptest.NewRequest(http.MethodGet, "/api/v1/environment?zone=hood", nil))
	var got []struct {
		ID       string `json:"id"`
		Channels map[string]struct {
			Value *float64 `json:"value"`
			State string   `json:"state"`
		} `json:"channels"`
	}
	if err := json.Unmarshal(rec.Body.Bytes(), &got); err != nil || rec.Code != 200 || len(got) != 3 {
		t.Fatalf("%d %s (%v)", rec.Code, rec.Body, err)
	}
	want := map[string][2]string{ // temperature, humidity
		"th-fresh": {"action", "ok"},
		"th-stale": {"unknown", "unknown"},
		"th-none":  {"unknown", "unknown"},
	}
	for _, g := range got {
		w := want[g.ID]
		if g.Channels["temperature_c"].State != w[0] || g.Channels["humidity_pct"].State != w[1] {
			t.Errorf("%s: temperature %s, humidity %s; want %s, %s", g.ID, g.Channels["temperature_c"].State, g.Channels["humidity_pct"].State, w[0], w[1])
		}
	}
	if got[1].Channels["temperature_c"].Value == nil {
		t.Errorf("the stale value is not shown beside its unknown state")
	}

	// A POST without a Content-Type reaches the ingest with none: the
	// ingest reads it as JSON.
	rec = httptest.NewRecorder()
	req := httptest.NewRequest(http.MethodPost, "/api/v1/environment", strings.NewReader(`{"sensor":"th-fresh"}`))
	r.ServeHTTP(rec, req)
	if rec.Code != 200 || env.gotCType != "" {
		t.Fatalf("%d %s, content type %q", rec.Code, rec.Body, env.gotCType)
	}
}

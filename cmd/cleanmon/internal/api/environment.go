package api

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"time"

	"github.com/go-chi/chi/v5"

	"cleanmon/cmd/cleanmon/internal/access"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/collector"
	"cleanmon/store"
)

// EnvironmentIngest takes request bodies of temperature, humidity and
// airflow-velocity samples and answers once they are durable.
type EnvironmentIngest interface {
	PostEnvironment(ctx context.Context, contentType string, declaredLength int64, body io.Reader) (collector.Result, error)
}

// EnvironmentStore reads the stored environment samples.
type EnvironmentStore interface {
	ScanEnvironment(sensor string, from, to time.Time, fn func(store.EnvSample) error) error
	LatestEnvironment(sensor string) (store.EnvSample, bool, error)
	ScanEnvironmentRollups(sensor string, step time.Duration, from, to time.Time, fn func(store.EnvRollup) error) error
}

// NoEnvironment is the environment side of a daemon without environment
// sensors: every sample is refused naming its sensor, nothing is stored.
type NoEnvironment struct{}

// PostEnvironment refuses the body: no sensor is configured.
func (NoEnvironment) PostEnvironment(context.Context, string, int64, io.Reader) (collector.Result, error) {
	return collector.Result{}, collector.NewInputError(0, "sensor", collector.RuleUnknownID, "no environment sensor is configured")
}

// ScanEnvironment finds nothing.
func (NoEnvironment) ScanEnvironment(string, time.Time, time.Time, func(store.EnvSample) error) error {
	return nil
}

// ScanEnvironmentRollups finds nothing.
func (NoEnvironment) ScanEnvironmentRollups(string, time.Duration, time.Time, time.Time, func(store.EnvRollup) error) error {
	return nil
}

// LatestEnvironment finds nothing.
func (NoEnvironment) LatestEnvironment(string) (store.EnvSample, bool, error) {
	return store.EnvSample{}, false, nil
}

// registerEnvironment mounts the environment routes under /api/v1.
func (s *Server) registerEnvironment(r chi.Router) {
	short := httpx.Timeout(httpx.RequestTimeout)
	long := httpx.Timeout(httpx.StreamTimeout)
	read := s.auth.Require(access.PermRead)
	r.With(short, s.auth.Require(access.PermIngest)).Post("/environment", s.postEnvironment)
	r.With(short, read).Get("/environment", s.listEnvironment)
	r.With(long, read, s.heavy.limit).Get("/sensors/{sensor}/environment", s.sensorEnvironment)
}

// postEnvironment is POST /api/v1/environment under the rules of the
// other ingest routes: a JSON object, array or NDJSON, all or nothing,
// 200 only once durable; a body without a Content-Type is JSON.
func (s *Server) postEnvironment(w http.ResponseWriter, r *http.Request) {
	res, err := s.envIngest.PostEnvironment(r.Context(), r.Header.Get("Content-Type"), r.ContentLength, r.Body)
	ingestAnswer(w, r, res, err)
}

// envChannelJSON is one channel of an environment sensor: its bands and
// the latest value against them.
type envChannelJSON struct {
	Unit   string                     `json:"unit"`
	Value  *float64                   `json:"value"`
	Alert  *collector.EnvironmentBand `json:"alert,omitempty"`
	Action *collector.EnvironmentBand `json:"action,omitempty"`
	// State is ok, alert, action (outside that band now; the alarm waits
	// for the delay) or unknown (no sample, or none within three sample
	// periods).
	State string `json:"state"`
}

// envSensorJSON is one sensor of GET /api/v1/environment.
type envSensorJSON struct {
	ID       string                    `json:"id"`
	Zone     string                    `json:"zone"`
	Kind     string                    `json:"kind"`
	Location string                    `json:"location,omitempty"`
	Delay    string                    `json:"delay"`
	Time     *time.Time                `json:"time"`
	Channels map[string]envChannelJSON `json:"channels"`
}

var envUnits = map[string]string{collector.ChanTemperature: "°C", collector.ChanHumidity: "%", collector.ChanVelocity: "m/s"}

// listEnvironment is GET /api/v1/environment[?zone=]: every environment
// sensor (of one zone) with its latest values against its bands. A value
// that is missing or older than three sample periods is unknown, never
// ok.
func (s *Server) listEnvironment(w http.ResponseWriter, r *http.Request) {
	zone := r.URL.Query().Get("zone")
	now := s.now()
	out := make([]envSensorJSON, 0, len(s.cfg.Environment))
	for i := range s.cfg.Environment {
		e := &s.cfg.Environment[i]
		if zone != "" && e.Zone != zone {
			continue
		}
		o, err := s.envObject(e, now)
		if err != nil {
			Errors.Write(w, "reading the store: ", err)
			return
		}
		out = append(out, o)
	}
	httpx.WriteJSON(w, http.StatusOK, out)
}

func (s *Server) envObject(e *collector.EnvironmentSensorConfig, now time.Time) (envSensorJSON, error) {
	delay, every := time.Duration(e.Delay), time.Duration(e.Interval)
	if delay <= 0 {
		delay = collector.DefaultEnvironmentDelay
	}
	if every <= 0 {
		every = collector.DefaultEnvironmentInterval
	}
	o := envSensorJSON{ID: e.ID, Zone: e.Zone, Kind: e.Kind, Location: e.Location, Delay: httpx.FormatDuration(delay), Channels: map[string]envChannelJSON{}}
	last, found, err := s.envStore.LatestEnvironment(e.ID)
	if err != nil {
		return o, err
	}
	fresh := found && now.Sub(last.Time) <= 3*every
	if found {
		t := last.Time.UTC()
		o.Time = &t
	}
	for _, ch := range e.Channels() {
		c := envChannelJSON{Unit: envUnits[ch], State: "unknown"}
		if lim := e.Limits(ch); lim != nil {
			c.Alert, c.Action = lim.Alert, lim.Action
		}
		if v, ok := envValue(last, ch); found && ok {
			c.Value = &v
			if fresh {
				c.State = "ok"
				if l := e.Judge(ch, v); l != "" {
					c.State = l
				}
			}
		}
		o.Channels[ch] = c
	}
	return o, nil
}

func envValue(e store.EnvSample, ch string) (float64, bool) {
	switch ch {
	case collector.ChanTemperature:
		return e.TemperatureC, e.Has&store.EnvTemperature != 0
	case collector.ChanHumidity:
		return e.HumidityPct, e.Has&store.EnvHumidity != 0
	case collector.ChanVelocity:
		return e.VelocityMS, e.Has&store.EnvVelocity != 0
	}
	return 0, false
}

// maxEnvRows bounds the rows of one rolled-up answer.
const maxEnvRows = 100000

// sensorEnvironment is GET /api/v1/sensors/{sensor}/environment?from=&to=
// [&step=]: the samples of one environment sensor in [from, to), oldest
// first, streamed; with step (e.g. 1h) one row per step instead, with
// samples, mean, min and max of each channel.
func (s *Server) sensorEnvironment(w http.ResponseWriter, r *http.Request) {
	id := chi.URLParam(r, "sensor")
	e, ok := s.cfg.EnvironmentSensor(id)
	if !ok {
		httpx.WriteError(w, http.StatusNotFound, fmt.Sprintf("unknown environment sensor %q", id))
		return
	}
	from, to, ok := s.queryRange(w, r)
	if !ok {
		return
	}
	step := time.Duration(0)
	if v := r.URL.Query().Get("step"); v != "" {
		d, err := time.ParseDuration(v)
		if err != nil || d < time.Minute {
			httpx.WriteFieldError(w, "step", fmt.Sprintf("%q is not a step such as 1h or 24h", v))
			return
		}
		if to.Sub(from)/d > maxEnvRows {
			httpx.WriteFieldError(w, "step", fmt.Sprintf("%s over [from, to) gives more than %d rows", v, maxEnvRows))
			return
		}
		step = d
	}
	rs := httpx.NewRowStream(w, Errors)
	var err error
	if step == 0 {
		err = s.envStore.ScanEnvironment(id, from, to, func(x store.EnvSample) error {
			return rs.Row(func(b []byte) []byte { return appendEnvRow(b, id, x) })
		})
	} else {
		err = s.envRollup(rs, id, e.Channels(), from, to, step)
	}
	if err != nil {
		rs.Fail(err)
		return
	}
	rs.End()
}

func appendEnvRow(b []byte, id string, x store.EnvSample) []byte {
	b = append(b, `{"time":`...)
	b = httpx.AppendTime(b, x.Time)
	b = append(b, `,"sensor":`...)
	b = strconv.AppendQuote(b, id)
	for _, ch := range []string{collector.ChanTemperature, collector.ChanHumidity, collector.ChanVelocity} {
		if v, ok := envValue(x, ch); ok {
			b = append(b, `,"`...)
			b = append(b, ch...)
			b = append(b, `":`...)
			b = httpx.AppendFloat(b, v)
		}
	}
	return append(b, '}')
}

// envRollup streams one row per step with at least one sample: samples,
// and mean, min and max of each channel, buckets on the clock (whole
// hours, UTC days) clipped to [from, to).
func (s *Server) envRollup(rs *httpx.RowStream, id string, chans []string, from, to time.Time, step time.Duration) error {
	idJSON := strconv.Quote(id)
	return s.envStore.ScanEnvironmentRollups(id, step, from, to, func(r store.EnvRollup) error {
		if r.Samples == 0 {
			return nil
		}
		return rs.Row(func(b []byte) []byte {
			b = append(b, `{"time":`...)
			b = httpx.AppendTime(b, r.Start)
			b = append(b, `,"sensor":`...)
			b = append(b, idJSON...)
			b = append(b, `,"samples":`...)
			b = strconv.AppendInt(b, int64(r.Samples), 10)
			for _, ch := range chans {
				st := envStat(r, ch)
				if st.N == 0 {
					continue
				}
				for _, part := range []struct {
					name string
					v    float64
				}{{"mean", st.Mean}, {"min", st.Min}, {"max", st.Max}} {
					b = append(b, `,"`...)
					b = append(b, ch...)
					b = append(b, '_')
					b = append(b, part.name...)
					b = append(b, `":`...)
					b = httpx.AppendFloat(b, part.v)
				}
			}
			return append(b, '}')
		})
	})
}

func envStat(r store.EnvRollup, ch string) store.EnvStat {
	switch ch {
	case collector.ChanTemperature:
		return r.Temperature
	case collector.ChanHumidity:
		return r.Humidity
	}
	return r.Velocity
}

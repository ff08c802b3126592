package collector

import (
	"context"
	"encoding/json"
	"errors"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/common/model"
)

// memEnvSink keeps one environment sample per sensor+time, as the store
// does, and counts the rest as duplicates.
type memEnvSink struct {
	mu      sync.Mutex
	rows    map[dupKey]Environment
	fail    error
	commits int
}

func newMemEnvSink() *memEnvSink { return &memEnvSink{rows: map[dupKey]Environment{}} }

func (m *memEnvSink) CommitEnvironment(ctx context.Context, es []Environment) ([]bool, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	if m.fail != nil {
		return nil, m.fail
	}
	m.commits++
	stored := make([]bool, len(es))
	for i, e := range es {
		k := dupKey{e.Sensor, e.Time.UnixNano()}
		if _, ok := m.rows[k]; ok {
			continue
		}
		m.rows[k] = e
		stored[i] = true
	}
	return stored, nil
}

func (m *memEnvSink) len() int {
	m.mu.Lock()
	defer m.mu.Unlock()
	return len(m.rows)
}

// demoEnvironment is the environment sensors of the invented demo site
// (Veldmark Photonics, building C): th-asm holds 21 ± 1 °C and 45 ± 5 %,
// th-met 20 ± 0.5 °C, av-hood 0.36–0.54 m/s, the EU GMP Annex 1 (2022)
// guidance for unidirectional airflow at the working position (from
// memory).
func demoEnvironment() []EnvironmentSensorConfig {
	return []EnvironmentSensorConfig{
		{ID: "th-asm", Zone: "assembly", Kind: EnvTemperatureHumidity,
			TemperatureC: &EnvironmentLimits{Alert: &EnvironmentBand{Low: f64(20.3), High: f64(21.7)}, Action: &EnvironmentBand{Low: f64(20), High: f64(22)}},
			HumidityPct:  &EnvironmentLimits{Action: &EnvironmentBand{Low: f64(40), High: f64(50)}}},
		{ID: "th-met", Zone: "metrology", Kind: EnvTemperatureHumidity,
			TemperatureC: &EnvironmentLimits{Action: &EnvironmentBand{Low: f64(19.5), High: f64(20.5)}}},
		{ID: "av-hood", Zone: "coating-hood", Kind: EnvAirVelocity, Delay: model.Duration(time.Minute),
			VelocityMS: &EnvironmentLimits{Action: &EnvironmentBand{Low: f64(0.36), High: f64(0.54)}}},
	}
}

func demoEnvRegistry(t testing.TB) *Registry {
	t.Helper()
	reg, err := demoRegistry(t).WithEnvironment(demoEnvironment(), EnvironmentBounds{})
	if err != nil {
		t.Fatal(err)
	}
	return reg
}

func TestEnvironmentIngestHTTP(t *testing.T) {
	const ts = `"time":"2026-03-02T10:00:00Z"`
	cases := []struct {
		name, ctype, body string
		status            int
		index             int
		field             string
		stored            int
	}{
		{"th object", "application/json", `{"sensor":"th-asm",` + ts + `,"temperature_c":21.2,"humidity_pct":44.0}`, 200, 0, "", 1},
		{"velocity, no content type", "", `{"sensor":"av-hood",` + ts + `,"velocity_m_s":0.45}`, 200, 0, "", 1},
		{"array", "application/json", `[{"sensor":"th-met",` + ts + `,"temperature_c":20.1,"humidity_pct":40},{"sensor":"av-hood",` + ts + `,"velocity_m_s":0.4}]`, 200, 0, "", 2},
		{"ndjson", "application/x-ndjson", `{"sensor":"th-met",` + ts + `,"temperature_c":20.1,"humidity_pct":40}` + "\n\n" + `{"sensor":"av-hood",` + ts + `,"velocity_m_s":0.4}` + "\n", 200, 0, "", 2},
		{"humidity missing", "application/json", `[{"sensor":"av-hood",` + ts + `,"velocity_m_s":0.4},{"sensor":"th-asm",` + ts + `,"temperature_c":21.2}]`, 400, 1, "humidity_pct", 0},
		{"channel the kind lacks", "application/json", `{"sensor":"av-hood",` + ts + `,"velocity_m_s":0.4,"temperature_c":21}`, 400, 0, "temperature_c", 0},
		{"humidity above 100 %", "application/json", `{"sensor":"th-asm",` + ts + `,"temperature_c":21,"humidity_pct":101}`, 400, 0, "humidity_pct", 0},
		{"temperature below −50 °C", "application/json", `{"sensor":"th-asm",` + ts + `,"temperature_c":-60,"humidity_pct":40}`, 400, 0, "temperature_c", 0},
		{"negative velocity", "application/json", `{"sensor":"av-hood",` + ts + `,"velocity_m_s":-0.1}`, 400, 0, "velocity_m_s", 0},
		{"velocity beyond 20 m/s", "application/json", `{"sensor":"av-hood",` + ts + `,"velocity_m_s":45}`, 400, 0, "velocity_m_s", 0},
		{"unknown sensor", "application/json", `{"sensor":"th-x",` + ts + `,"temperature_c":21}`, 400, 0, "sensor", 0},
		{"a DP sensor", "application/json", `{"sensor":"dp-asm-gown",` + ts + `,"temperature_c":21}`, 400, 0, "sensor", 0},
		{"string value", "application/json", `{"sensor":"av-hood",` + ts + `,"velocity_m_s":"0.4"}`, 400, 0, "velocity_m_s", 0},
		{"unknown field", "application/json", `{"sensor":"av-hood",` + ts + `,"velocity_m_s":0.4,"pa":3}`, 400, 0, "pa", 0},
		{"no time", "application/json", `{"sensor":"av-hood","velocity_m_s":0.4}`, 400, 0, "time", 0},
		{"future", "application/json", `{"sensor":"av-hood","time":"2026-03-02T11:00:00Z","velocity_m_s":0.4}`, 400, 0, "time", 0},
		{"ndjson third line bad", "application/x-ndjson", `{"sensor":"av-hood",` + ts + `,"velocity_m_s":0.4}` + "\n" + `{"sensor":"av-hood","time":"2026-03-02T10:00:10Z","velocity_m_s":0.4}` + "\n" + `{"sensor":"av-hood",` + ts + `}`, 400, 2, "velocity_m_s", 0},
		{"text/plain", "text/plain", `{}`, 415, 0, "", 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			sink := newMemEnvSink()
			in := NewEnvironmentIngest(demoEnvRegistry(t), sink, IngestOptions{Now: func() time.Time { return testNow }})
			srv := httptest.NewServer(in)
			defer srv.Close()
			req, _ := http.NewRequest(http.MethodPost, srv.URL, strings.NewReader(c.body))
			if c.ctype != "" {
				req.Header.Set("Content-Type", c.ctype)
			}
			resp, err := srv.Client().Do(req)
			if err != nil {
				t.Fatal(err)
			}
			defer resp.Body.Close()
			var body struct {
				Error    string `json:"error"`
				Index    *int   `json:"index"`
				Field    string `json:"field"`
				Accepted int    `json:"accepted"`
			}
			if err := json.NewDecoder(resp.Body).Decode(&body); err != nil {
				t.Fatal(err)
			}
			if resp.StatusCode != c.status {
				t.Fatalf("status %d (%s), want %d", resp.StatusCode, body.Error, c.status)
			}
			if c.status == 400 && (body.Index == nil || *body.Index != c.index || body.Field != c.field) {
				t.Errorf("error %q at index %v field %q, want index %d field %q", body.Error, body.Index, body.Field, c.index, c.field)
			}
			if got := sink.len(); got != c.stored || (c.status == 200 && body.Accepted != c.stored) {
				t.Errorf("stored %d, accepted %d, want %d", got, body.Accepted, c.stored)
			}
		})
	}
}

func TestEnvironmentSubmitCommitFailure(t *testing.T) {
	sink := newMemEnvSink()
	sink.fail = errors.New("disk full")
	in := NewEnvironmentIngest(demoEnvRegistry(t), sink, IngestOptions{Now: func() time.Time { return testNow }})
	var seen int
	in.OnEnvironment(func(es []Environment) { seen += len(es) })
	_, err := in.SubmitEnvironment(context.Background(), []RawEnvironment{{Sensor: "av-hood", Time: "2026-03-02T10:00:00Z", VelocityMS: f64(0.4)}})
	if !errors.Is(err, ErrCommit) || seen != 0 {
		t.Fatalf("err %v, observers saw %d: a failed commit must be ErrCommit and observed by nobody", err, seen)
	}
	sink.fail = nil
	raws := []RawEnvironment{{Sensor: "av-hood", Time: "2026-03-02T10:00:00Z", VelocityMS: f64(0.4)}, {Sensor: "av-hood", Time: "2026-03-02T10:00:00Z", VelocityMS: f64(0.4)}}
	res, err := in.SubmitEnvironment(context.Background(), raws)
	if err != nil || res.Accepted != 1 || res.Duplicates != 1 || seen != 1 {
		t.Fatalf("res %+v err %v seen %d, want 1 accepted, 1 duplicate, 1 observed", res, err, seen)
	}
}

func TestValidateEnvironmentSensors(t *testing.T) {
	band := func(lo, hi float64) *EnvironmentBand { return &EnvironmentBand{Low: f64(lo), High: f64(hi)} }
	zones := map[string]bool{"assembly": true, "coating-hood": true}
	cases := []struct {
		name string
		mod  func(*EnvironmentSensorConfig)
		path string // "" = valid
	}{
		{"valid", func(*EnvironmentSensorConfig) {}, ""},
		{"unknown kind", func(e *EnvironmentSensorConfig) { e.Kind = "thermo" }, "environment[0].kind"},
		{"unknown zone", func(e *EnvironmentSensorConfig) { e.Zone = "lobby" }, "environment[0].zone"},
		{"id of a DP sensor", func(e *EnvironmentSensorConfig) { e.ID = "dp-asm-gown" }, "environment[0].id"},
		{"band of another kind", func(e *EnvironmentSensorConfig) {
			e.VelocityMS = &EnvironmentLimits{Action: band(0.36, 0.54)}
		}, "environment[0].velocity_m_s"},
		{"low above high", func(e *EnvironmentSensorConfig) { e.TemperatureC.Action = band(22, 20) }, "environment[0].temperature_c.action.high"},
		{"alert outside action", func(e *EnvironmentSensorConfig) { e.TemperatureC.Alert = band(19.5, 21.5) }, "environment[0].temperature_c.alert.low"},
		{"beyond the physical range", func(e *EnvironmentSensorConfig) { e.HumidityPct = &EnvironmentLimits{Action: band(40, 120)} }, "environment[0].humidity_pct.action.high"},
		{"empty band", func(e *EnvironmentSensorConfig) { e.TemperatureC.Alert = &EnvironmentBand{} }, "environment[0].temperature_c.alert"},
		{"negative delay", func(e *EnvironmentSensorConfig) { e.Delay = -1 }, "environment[0].delay"},
		{"modbus without velocity register", func(e *EnvironmentSensorConfig) {
			e.Modbus = &ModbusSource{Address: "127.0.0.1:502", TemperatureC: &ModbusRegister{Addr: ip(0)}}
		}, "environment[0].modbus.humidity_pct"},
		{"bad serial parity", func(e *EnvironmentSensorConfig) {
			e.Modbus = &ModbusSource{Address: "rtu:///dev/ttyUSB0?parity=mark", TemperatureC: &ModbusRegister{Addr: ip(0)}, HumidityPct: &ModbusRegister{Addr: ip(1)}}
		}, "environment[0].modbus.address"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			e := demoEnvironment()[0]
			lim := *e.TemperatureC
			e.TemperatureC = &lim
			c.mod(&e)
			errs := ValidateEnvironmentSensors([]EnvironmentSensorConfig{e}, zones, map[string]bool{"dp-asm-gown": true}, EnvironmentBounds{})
			if c.path == "" {
				if len(errs) != 0 {
					t.Fatalf("valid config refused: %v", errs)
				}
				return
			}
			for _, fe := range errs {
				if fe.Path == c.path {
					return
				}
			}
			t.Errorf("no error at %s; got %v", c.path, errs)
		})
	}
}

// The demo's bands judged at and beyond their edges: a value on an edge is
// inside (0.1 + 0.2 counts as on 0.3, not beyond it).
func TestEnvironmentJudge(t *testing.T) {
	reg := demoEnvRegistry(t)
	cases := []struct {
		sensor, ch string
		v          float64
		want       string
	}{
		// EU GMP Annex 1 (2022) guidance, 0.36–0.54 m/s at the working
		// position of unidirectional airflow (from memory).
		{"av-hood", ChanVelocity, 0.45, ""},
		{"av-hood", ChanVelocity, 0.36, ""},
		{"av-hood", ChanVelocity, 0.54, ""},
		{"av-hood", ChanVelocity, 0.35, "action"},
		{"av-hood", ChanVelocity, 0.55, "action"},
		{"th-asm", ChanTemperature, 21.0, ""},
		{"th-asm", ChanTemperature, 21.8, "alert"},
		{"th-asm", ChanTemperature, 22.1, "action"},
		{"th-asm", ChanTemperature, 20.1, "alert"},
		{"th-asm", ChanHumidity, 0.1 + 50 - 0.1, ""},
		{"th-asm", ChanHumidity, 50.5, "action"},
		{"th-met", ChanTemperature, 20.5, ""},
		{"th-met", ChanTemperature, 20.6, "action"},
		{"th-met", ChanHumidity, 90, ""}, // no humidity band: recorded, not judged
	}
	for _, c := range cases {
		ei, ok := reg.EnvironmentSensor(c.sensor)
		if !ok {
			t.Fatalf("no sensor %s", c.sensor)
		}
		if got := ei.Judge(c.ch, c.v); got != c.want {
			t.Errorf("%s %s %g: %q, want %q", c.sensor, c.ch, c.v, got, c.want)
		}
	}
	if ei, _ := reg.EnvironmentSensor("th-asm"); time.Duration(ei.Delay) != DefaultEnvironmentDelay || ei.Source != SourcePush {
		t.Errorf("defaults not applied: %+v", ei)
	}
}

func TestDecodeEnvironment(t *testing.T) {
	got, err := DecodeEnvironment(strings.NewReader(`[{"sensor":"a","time":"t","velocity_m_s":1},{"sensor":"b","time":"t","temperature_c":2}]`), "", 1<<20)
	if err != nil || len(got) != 2 || *got[0].VelocityMS != 1 || got[1].VelocityMS != nil || *got[1].TemperatureC != 2 {
		t.Fatalf("%+v %v", got, err)
	}
	_, err = DecodeEnvironment(strings.NewReader(`[{"sensor":"a"},{"sensor":"b","temperature_c":true}]`), "", 1<<20)
	var ie *InputError
	if !errors.As(err, &ie) || ie.Index != 1 || ie.Field != "temperature_c" {
		t.Fatalf("error %v, want element 1, temperature_c", err)
	}
}

// A band open on one side judges that side only.
func TestEnvironmentJudgeOneSided(t *testing.T) {
	e := EnvironmentSensorConfig{ID: "th-x", Zone: "assembly", Kind: EnvHumidity,
		HumidityPct: &EnvironmentLimits{Alert: &EnvironmentBand{High: f64(55)}, Action: &EnvironmentBand{High: f64(60)}}}
	if errs := ValidateEnvironmentSensors([]EnvironmentSensorConfig{e}, nil, nil, EnvironmentBounds{}); len(errs) > 0 {
		t.Fatalf("refused: %v", errs)
	}
	for v, want := range map[float64]string{0: "", 55: "", 56: "alert", 60: "alert", 61: "action"} {
		if got := e.Judge(ChanHumidity, v); got != want {
			t.Errorf("%g %%: %q, want %q", v, got, want)
		}
	}
	// An action band with a low side needs the alert band to have one too.
	e.HumidityPct.Action.Low = f64(30)
	if errs := ValidateEnvironmentSensors([]EnvironmentSensorConfig{e}, nil, nil, EnvironmentBounds{}); len(errs) != 1 || errs[0].Path != "environment[0].humidity_pct.alert.low" {
		t.Errorf("got %v", errs)
	}
}

// Ingests takes all three kinds, each to its own ingest.
func TestIngestsJoinsTheKinds(t *testing.T) {
	var sink MQTTSink = Ingests{Ingest: newTestIngest(t, newMemSink(), IngestOptions{}), Environment: NewEnvironmentIngest(demoEnvRegistry(t), newMemEnvSink(), IngestOptions{Now: func() time.Time { return testNow }})}
	res, err := sink.SubmitEnvironment(context.Background(), []RawEnvironment{{Sensor: "av-hood", Time: "2026-03-02T10:00:00Z", VelocityMS: f64(0.5)}})
	if err != nil || res.Accepted != 1 {
		t.Fatalf("%+v %v", res, err)
	}
	if _, err := sink.SubmitPressure(context.Background(), []RawPressure{{Sensor: "dp-asm-gown", Time: "2026-03-02T10:00:00Z", Pa: f64(12)}}); err != nil {
		t.Fatal(err)
	}
}

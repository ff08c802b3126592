package alerts

import (
	"bytes"
	"io"
	"log/slog"
	"maps"
	"math"
	"net/http"
	"net/http/httptest"
	"os"
	"os/exec"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	"github.com/prometheus/client_golang/prometheus/testutil"
)

// ntGather collects c on a pedantic registry (which also checks that
// every metric was described) and returns each series as
// `name{label="value",...}` → value, labels sorted.
func ntGather(t *testing.T, c prometheus.Collector) map[string]float64 {
	t.Helper()
	reg := prometheus.NewPedanticRegistry()
	if err := reg.Register(c); err != nil {
		t.Fatal(err)
	}
	mfs, err := reg.Gather()
	if err != nil {
		t.Fatalf("gather: %v", err)
	}
	out := map[string]float64{}
	for _, mf := range mfs {
		for _, m := range mf.GetMetric() {
			var ls []string
			for _, lp := range m.GetLabel() {
				ls = append(ls, lp.GetName()+"="+`"`+lp.GetValue()+`"`)
			}
			sort.Strings(ls)
			key := mf.GetName() + "{" + strings.Join(ls, ",") + "}"
			switch {
			case m.GetGauge() != nil:
				out[key] = m.GetGauge().GetValue()
			case m.GetCounter() != nil:
				out[key] = m.GetCounter().GetValue()
			default:
				t.Fatalf("%s: neither gauge nor counter", key)
			}
		}
	}
	return out
}

// ntSelect keeps the series of the named metrics.
func ntSelect(all map[string]float64, names ...string) map[string]float64 {
	out := map[string]float64{}
	for k, v := range all {
		for _, n := range names {
			if strings.HasPrefix(k, n+"{") {
				out[k] = v
			}
		}
	}
	return out
}

func ntLint(t *testing.T, c prometheus.Collector) {
	t.Helper()
	problems, err := testutil.CollectAndLint(c)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("lint: %s: %s", p.Metric, p.Text)
	}
}

// ntSite is two zones of the invented demo site. Limits, ISO
// 14644-1:2015 Table 1: ISO 7 352 000 /m³ at ≥0.5 µm and 2 930 at ≥5 µm;
// ISO 8 3 520 000 and 29 300.
func ntSite(t *testing.T, now func() time.Time) *ZoneTracker {
	t.Helper()
	zones := []ZoneConfig{
		{
			ID: "assembly", Class: ntSize(7), OperatingState: InOperation, AreaM2: 60,
			Sizes:     []string{"0.5", "5"},
			Levels:    map[string]Levels{"0.5": {Alert: ntSize(100000), Action: ntSize(250000)}},
			Locations: []LocationConfig{{ID: "asm-1"}, {ID: "asm-2"}},
		},
		{
			ID: "gowning", Class: ntSize(8), OperatingState: AtRest, AreaM2: 12,
			Sizes: []string{"0.5", "5"}, Locations: []LocationConfig{{ID: "gown-1"}},
		},
	}
	b := []Binding{{"pc-asm-1", "assembly", "asm-1"}, {"pc-asm-2", "assembly", "asm-2"}, {"pc-gown", "gowning", "gown-1"}}
	zt, err := NewZoneTracker(zones, b, ZoneTrackerOptions{Now: now})
	if err != nil {
		t.Fatal(err)
	}
	return zt
}

func ntObs(counter string, at time.Time, status string, p05, p5 float64) Observation {
	return Observation{Counter: counter, Time: at, VolumeL: 28.3, Status: status, Sizes: []float64{0.3, 0.5, 5}, PerM3: []float64{3 * p05, p05, p5}}
}

func TestZoneCollector(t *testing.T) {
	now := ntT0.Add(time.Minute)
	at := ntT0.Add(30 * time.Second)
	limits := map[string]float64{
		`cleanmon_class_limit_per_cubic_meter{size_um="0.5",zone="assembly"}`: 352000,
		`cleanmon_class_limit_per_cubic_meter{size_um="5",zone="assembly"}`:   2930,
		`cleanmon_class_limit_per_cubic_meter{size_um="0.5",zone="gowning"}`:  3520000,
		`cleanmon_class_limit_per_cubic_meter{size_um="5",zone="gowning"}`:    29300,
		`cleanmon_alert_level_per_cubic_meter{size_um="0.5",zone="assembly"}`: 100000,
		// Configured action level at 0.5 µm; with none configured the
		// action level is the class limit.
		`cleanmon_action_level_per_cubic_meter{size_um="0.5",zone="assembly"}`: 250000,
		`cleanmon_action_level_per_cubic_meter{size_um="5",zone="assembly"}`:   2930,
		`cleanmon_action_level_per_cubic_meter{size_um="0.5",zone="gowning"}`:  3520000,
		`cleanmon_action_level_per_cubic_meter{size_um="5",zone="gowning"}`:    29300,
	}
	cases := []struct {
		name  string
		feed  []Observation
		state ZoneStatus // of assembly; gowning has no data and stays unknown
		conc  map[string]float64
		fresh [2]float64
		means int // number of mean series
	}{
		{name: "no data", state: StatusUnknown, conc: map[string]float64{}},
		{name: "both in class", state: StatusInClass,
			feed: []Observation{ntObs("pc-asm-1", at, "ok", 20000, 100), ntObs("pc-asm-2", at, "ok", 30000, 200)},
			conc: map[string]float64{
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-1",size_um="0.5",zone="assembly"}`: 20000,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-1",size_um="5",zone="assembly"}`:   100,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-2",size_um="0.5",zone="assembly"}`: 30000,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-2",size_um="5",zone="assembly"}`:   200,
			}, fresh: [2]float64{1, 1}, means: 4},
		{name: "one location silent is unknown, not in class", state: StatusUnknown,
			feed: []Observation{ntObs("pc-asm-1", at, "ok", 20000, 100)},
			conc: map[string]float64{
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-1",size_um="0.5",zone="assembly"}`: 20000,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-1",size_um="5",zone="assembly"}`:   100,
			}, fresh: [2]float64{1, 0}, means: 2},
		{name: "above the action level", state: StatusAction,
			feed: []Observation{ntObs("pc-asm-1", at, "ok", 300000, 100), ntObs("pc-asm-2", at, "ok", 30000, 200)},
			conc: map[string]float64{
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-1",size_um="0.5",zone="assembly"}`: 300000,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-1",size_um="5",zone="assembly"}`:   100,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-2",size_um="0.5",zone="assembly"}`: 30000,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-2",size_um="5",zone="assembly"}`:   200,
			}, fresh: [2]float64{1, 1}, means: 4},
		{name: "a fault reading is not shown", state: StatusUnknown,
			feed: []Observation{ntObs("pc-asm-1", at, StatusFault, 9e9, 9e9), ntObs("pc-asm-2", at, "ok", 30000, 200)},
			conc: map[string]float64{
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-2",size_um="0.5",zone="assembly"}`: 30000,
				`cleanmon_particle_concentration_per_cubic_meter{location="asm-2",size_um="5",zone="assembly"}`:   200,
			}, fresh: [2]float64{0, 1}, means: 2},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			zt := ntSite(t, func() time.Time { return now })
			zt.Observe(tc.feed...)
			c := NewZoneCollector(zt)
			got := ntGather(t, c)

			if l := ntSelect(got, "cleanmon_class_limit_per_cubic_meter", "cleanmon_alert_level_per_cubic_meter", "cleanmon_action_level_per_cubic_meter"); !maps.Equal(l, limits) {
				t.Errorf("limits and levels\n got %v\nwant %v", l, limits)
			}
			if cc := ntSelect(got, "cleanmon_particle_concentration_per_cubic_meter"); !maps.Equal(cc, tc.conc) {
				t.Errorf("concentrations\n got %v\nwant %v", cc, tc.conc)
			}
			inClass := 0.0
			if tc.state == StatusInClass {
				inClass = 1
			}
			if v := got[`cleanmon_zone_in_class{zone="assembly"}`]; v != inClass {
				t.Errorf("in_class %v, want %v", v, inClass)
			}
			if v, ok := got[`cleanmon_zone_in_class{zone="gowning"}`]; !ok || v != 0 {
				t.Errorf("gowning, unknown, shows in_class %v (present %v), want 0", v, ok)
			}
			states := ntSelect(got, "cleanmon_zone_state")
			if len(states) != 2*len(zoneStatuses) {
				t.Errorf("%d zone_state series, want %d", len(states), 2*len(zoneStatuses))
			}
			for _, st := range zoneStatuses {
				want := 0.0
				if st == tc.state {
					want = 1
				}
				if v := states[`cleanmon_zone_state{state="`+string(st)+`",zone="assembly"}`]; v != want {
					t.Errorf("zone_state %s = %v, want %v", st, v, want)
				}
			}
			if v := got[`cleanmon_zone_state{state="unknown",zone="gowning"}`]; v != 1 {
				t.Errorf("gowning unknown = %v", v)
			}
			if v := got[`cleanmon_zone_operating_state{state="at-rest",zone="gowning"}`] + got[`cleanmon_zone_operating_state{state="in-operation",zone="assembly"}`]; v != 2 {
				t.Errorf("operating states wrong: %v", ntSelect(got, "cleanmon_zone_operating_state"))
			}
			if f := [2]float64{got[`cleanmon_location_fresh{location="asm-1",zone="assembly"}`], got[`cleanmon_location_fresh{location="asm-2",zone="assembly"}`]}; f != tc.fresh {
				t.Errorf("fresh %v, want %v", f, tc.fresh)
			}
			if n := len(ntSelect(got, "cleanmon_particle_concentration_mean_per_cubic_meter")); n != tc.means {
				t.Errorf("%d mean series, want %d", n, tc.means)
			}
			ntLint(t, c)
		})
	}
}

func TestZoneCollectorMaintenance(t *testing.T) {
	zt := ntSite(t, func() time.Time { return ntT0 })
	if _, err := zt.SetOperatingState(OperatingChange{Zone: "assembly", State: Maintenance, By: "j.ortega", Reason: "filter change"}, nil); err != nil {
		t.Fatal(err)
	}
	got := ntSelect(ntGather(t, NewZoneCollector(zt)), "cleanmon_zone_operating_state")
	want := map[string]float64{}
	for _, z := range []string{"assembly", "gowning"} {
		for _, s := range operatingStates {
			want[`cleanmon_zone_operating_state{state="`+s+`",zone="`+z+`"}`] = 0
		}
	}
	want[`cleanmon_zone_operating_state{state="maintenance",zone="assembly"}`] = 1
	want[`cleanmon_zone_operating_state{state="at-rest",zone="gowning"}`] = 1
	if !maps.Equal(got, want) {
		t.Errorf("got %v\nwant %v", got, want)
	}
}

func TestPressureCollector(t *testing.T) {
	src := SensorDPFunc(func() []SensorDP {
		return []SensorDP{
			{Sensor: "dp-asm-gown", High: "assembly", Low: "gowning", MinPa: 8, Pa: 12.4, Time: ntT0},
			// Listed again with an older reading: the newer one stands.
			{Sensor: "dp-asm-gown", High: "assembly", Low: "gowning", MinPa: 8, Pa: 3, Time: ntT0.Add(-time.Minute)},
			{Sensor: "dp-gown-corr", High: "gowning", Low: "corridor", MinPa: 8, Pa: -1.5, Time: ntT0.Add(time.Second)},
			{Sensor: "dp-met-asm", High: "metrology", Low: "assembly", MinPa: 5}, // no reading yet
		}
	})
	c := NewPressureCollector(src)
	got := ntGather(t, c)
	want := map[string]float64{
		`cleanmon_differential_pressure_pascals{high="assembly",low="gowning",sensor="dp-asm-gown"}`:      12.4,
		`cleanmon_differential_pressure_pascals{high="gowning",low="corridor",sensor="dp-gown-corr"}`:     -1.5,
		`cleanmon_differential_pressure_min_pascals{high="assembly",low="gowning",sensor="dp-asm-gown"}`:  8,
		`cleanmon_differential_pressure_min_pascals{high="gowning",low="corridor",sensor="dp-gown-corr"}`: 8,
		`cleanmon_differential_pressure_min_pascals{high="metrology",low="assembly",sensor="dp-met-asm"}`: 5,
		`cleanmon_pressure_last_reading_timestamp_seconds{sensor="dp-asm-gown"}`:                          float64(ntT0.Unix()),
		`cleanmon_pressure_last_reading_timestamp_seconds{sensor="dp-gown-corr"}`:                         float64(ntT0.Unix() + 1),
	}
	if !maps.Equal(got, want) {
		t.Errorf("got %v\nwant %v", got, want)
	}
	ntLint(t, c)
}

type ntAlarmList []Alarm

func (l ntAlarmList) Alarms(all bool) []Alarm {
	if all {
		return l
	}
	var out []Alarm
	for _, a := range l {
		if a.State != StateCleared {
			out = append(out, a)
		}
	}
	return out
}

func TestAlarmCollector(t *testing.T) {
	alarm := func(zone, kind, level, state string) Alarm {
		return Alarm{ID: zone + kind + level + state, Zone: zone, Kind: kind, Level: level, State: state}
	}
	src := ntAlarmList{
		alarm("assembly", KindExcursion, LevelAlert, StateActive),
		alarm("assembly", KindExcursion, LevelAlert, StateAcknowledged),
		alarm("assembly", KindExcursion, LevelAction, StateDelayed), // delay running: not counted
		alarm("assembly", KindStale, LevelAction, StateCleared),
		alarm("assembly", KindPressureReversal, LevelAction, StateActive),
		alarm("metrology", KindInstrument, LevelAlert, StateActive), // not in the zone list
	}
	c := NewAlarmCollector(src, []string{"assembly", "gowning"})
	got := ntGather(t, c)
	if n := len(got); n != 2*len(alarmKinds)*2+1 {
		t.Errorf("%d series, want %d", n, 2*len(alarmKinds)*2+1)
	}
	nonZero := map[string]float64{}
	for k, v := range got {
		if v != 0 {
			nonZero[k] = v
		}
	}
	want := map[string]float64{
		`cleanmon_alarm_active{kind="excursion",level="alert",zone="assembly"}`:          2,
		`cleanmon_alarm_active{kind="pressure-reversal",level="action",zone="assembly"}`: 1,
		`cleanmon_alarm_active{kind="instrument",level="alert",zone="metrology"}`:        1,
	}
	if !maps.Equal(nonZero, want) {
		t.Errorf("non-zero %v\nwant %v", nonZero, want)
	}
	if _, ok := got[`cleanmon_alarm_active{kind="trend",level="action",zone="gowning"}`]; !ok {
		t.Errorf("no zero series for a configured zone")
	}
	ntLint(t, c)

	// The exposition itself, for one small case.
	one := NewAlarmCollector(ntAlarmList{alarm("assembly", KindStale, LevelAlert, StateActive)}, nil)
	exp := `# HELP cleanmon_alarm_active Number of alarms firing (active or acknowledged, not yet cleared) per zone, kind and level; delayed alarms, whose delay still runs, are not counted.
# TYPE cleanmon_alarm_active gauge
cleanmon_alarm_active{kind="stale",level="alert",zone="assembly"} 1
`
	if err := testutil.CollectAndCompare(one, strings.NewReader(exp)); err != nil {
		t.Error(err)
	}
}

func TestIngestMetrics(t *testing.T) {
	m := NewIngestMetrics([]string{"pc-asm-1", "pc-hood"})
	m.Count("pc-asm-1", IngestAccepted, 3)
	m.Count("pc-asm-1", IngestDuplicate, 1)
	m.Count("pc-rogue", IngestRejected, 2) // not configured: counted as unknown
	m.Count("", IngestRejected, 1)         // a request too broken to name its counter
	m.Count("pc-hood", "mangled", 1)       // not a result: counted as unknown
	m.Count("pc-hood", IngestAccepted, 0)  // nothing
	m.Count("pc-hood", IngestAccepted, -5) // nothing
	m.Observe("pc-asm-1", ntT0, 28.3)
	m.Observe("pc-asm-1", ntT0.Add(-time.Hour), 10) // backfill: moves nothing
	m.Observe("pc-hood", ntT0.Add(time.Minute), math.NaN())
	m.Observe("pc-hood", ntT0.Add(2*time.Minute), 0) // no flow reported
	m.Observe("pc-rogue", ntT0, 28.3)                // not configured: not observed

	got := ntGather(t, m)
	want := map[string]float64{
		`cleanmon_readings_total{counter="pc-asm-1",result="accepted"}`:          3,
		`cleanmon_readings_total{counter="pc-asm-1",result="duplicate"}`:         1,
		`cleanmon_readings_total{counter="pc-asm-1",result="rejected"}`:          0,
		`cleanmon_readings_total{counter="pc-asm-1",result="conflict"}`:          0,
		`cleanmon_readings_total{counter="pc-hood",result="conflict"}`:           0,
		`cleanmon_readings_total{counter="pc-hood",result="accepted"}`:           0,
		`cleanmon_readings_total{counter="pc-hood",result="duplicate"}`:          0,
		`cleanmon_readings_total{counter="pc-hood",result="rejected"}`:           0,
		`cleanmon_readings_total{counter="pc-hood",result="unknown"}`:            1,
		`cleanmon_readings_total{counter="unknown",result="rejected"}`:           3,
		`cleanmon_instrument_last_reading_timestamp_seconds{counter="pc-asm-1"}`: float64(ntT0.Unix()),
		`cleanmon_instrument_last_reading_timestamp_seconds{counter="pc-hood"}`:  float64(ntT0.Unix() + 120),
		`cleanmon_instrument_flow_liters_per_minute{counter="pc-asm-1"}`:         28.3,
	}
	if !maps.Equal(got, want) {
		t.Errorf("got %v\nwant %v", got, want)
	}
	ntLint(t, m)
}

func TestNotifierCollector(t *testing.T) {
	down := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		http.Error(w, "down", http.StatusBadGateway)
	}))
	defer down.Close()
	hook, _ := NewWebhook(WebhookConfig{Name: "facilities", URL: down.URL, Secret: "k"}, nil)
	ob := newNtOutbox()
	ts := ntTransitions(2)
	ob.add("log", ts...)
	ob.add("facilities", ts...)
	d := NewDispatcher(ob, []Notifier{NewLogNotifier(slog.New(slog.DiscardHandler)), hook}, DispatcherOptions{Poll: time.Millisecond, BaseBackoff: time.Millisecond, MaxBackoff: time.Millisecond})
	stop := ntRun(t, d)
	ntWaitFor(t, 10*time.Second, "the log deliveries and two failures", func() bool {
		h := d.Health()
		return h["log"].Delivered == 2 && h["facilities"].Failed >= 2
	})
	stop()
	c := NewNotifierCollector(d)
	got := ntGather(t, c)
	failed := got[`cleanmon_notifications_total{notifier="facilities",result="failed"}`]
	want := map[string]float64{
		`cleanmon_notifications_total{notifier="log",result="delivered"}`:        2,
		`cleanmon_notifications_total{notifier="log",result="failed"}`:           0,
		`cleanmon_notifications_total{notifier="log",result="rejected"}`:         0,
		`cleanmon_notifications_total{notifier="facilities",result="delivered"}`: 0,
		`cleanmon_notifications_total{notifier="facilities",result="failed"}`:    failed,
		`cleanmon_notifications_total{notifier="facilities",result="rejected"}`:  0,
		`cleanmon_notification_queue{notifier="log"}`:                            0,
		`cleanmon_notification_queue{notifier="facilities"}`:                     2,
		`cleanmon_notifier_up{notifier="log"}`:                                   1,
		`cleanmon_notifier_up{notifier="facilities"}`:                            0,
	}
	if failed < 2 || !maps.Equal(got, want) {
		t.Errorf("got %v\nwant %v", got, want)
	}
	ntLint(t, c)
}

// The whole exposition, as the daemon serves it, passes promtool.
func TestExpositionPassesPromtool(t *testing.T) {
	now := ntT0.Add(time.Minute)
	zt := ntSite(t, func() time.Time { return now })
	zt.Observe(ntObs("pc-asm-1", ntT0, "ok", 20000, 100))
	ing := NewIngestMetrics([]string{"pc-asm-1"})
	ing.Count("pc-asm-1", IngestAccepted, 1)
	ing.Observe("pc-asm-1", ntT0, 28.3)
	d := NewDispatcher(newNtOutbox(), []Notifier{NewLogNotifier(nil)}, DispatcherOptions{})
	reg := prometheus.NewPedanticRegistry()
	reg.MustRegister(
		NewZoneCollector(zt),
		NewPressureCollector(SensorDPFunc(func() []SensorDP {
			return []SensorDP{{Sensor: "dp-asm-gown", High: "assembly", Low: "gowning", MinPa: 8, Pa: 12.4, Time: ntT0}}
		})),
		NewAlarmCollector(ntAlarmList{{Zone: "assembly", Kind: KindStale, Level: LevelAlert, State: StateActive}}, []string{"assembly", "gowning"}),
		ing,
		NewNotifierCollector(d),
	)
	srv := httptest.NewServer(promhttp.HandlerFor(reg, promhttp.HandlerOpts{}))
	defer srv.Close()
	resp, err := http.Get(srv.URL)
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	for _, name := range []string{
		"cleanmon_particle_concentration_per_cubic_meter", "cleanmon_class_limit_per_cubic_meter", "cleanmon_zone_in_class",
		"cleanmon_zone_state", "cleanmon_differential_pressure_pascals", "cleanmon_alarm_active", "cleanmon_readings_total",
		"cleanmon_instrument_last_reading_timestamp_seconds", "cleanmon_instrument_flow_liters_per_minute",
		"cleanmon_notifications_total", "cleanmon_notification_queue", "cleanmon_notifier_up",
	} {
		if !bytes.Contains(body, []byte("\n# HELP "+name+" ")) && !bytes.HasPrefix(body, []byte("# HELP "+name+" ")) {
			t.Errorf("exposition lacks %s with HELP", name)
		}
	}
	problems, err := testutil.GatherAndLint(reg)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range problems {
		t.Errorf("lint: %s: %s", p.Metric, p.Text)
	}

	promtool, err := exec.LookPath("promtool")
	if err != nil {
		if os.Getenv("CLEANMON_REQUIRE_TOOLS") != "" {
			t.Fatal("promtool not on PATH (Debian: prometheus) and CLEANMON_REQUIRE_TOOLS is set")
		}
		t.Skip("promtool not on PATH (Debian: prometheus); the client_golang lint above passed")
	}
	cmd := exec.Command(promtool, "check", "metrics")
	cmd.Stdin = bytes.NewReader(body)
	out, err := cmd.CombinedOutput()
	tolerated := map[string]bool{}
	var findings []string
	for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		if line = strings.TrimSpace(line); line != "" && !tolerated[line] {
			findings = append(findings, line)
		}
	}
	if len(findings) > 0 {
		t.Errorf("promtool check metrics: %v\n%s", err, strings.Join(findings, "\n"))
	}
	if err != nil && len(findings) == 0 {
		t.Errorf("promtool check metrics failed without a finding: %v", err)
	}
	// promtool does find problems: a counter without _total fails.
	bad := exec.Command(promtool, "check", "metrics")
	bad.Stdin = strings.NewReader("# HELP cleanmon_bad_count A counter.\n# TYPE cleanmon_bad_count counter\ncleanmon_bad_count 1\n")
	if out, err := bad.CombinedOutput(); err == nil {
		t.Errorf("promtool accepted a counter without _total: %s", out)
	}
}

func TestMetricNamesAreTheDesignOnes(t *testing.T) {
	// the documented metric names, kept stable, with their label sets.
	want := map[string][]string{
		"cleanmon_particle_concentration_per_cubic_meter":    {"zone", "location", "size_um"},
		"cleanmon_class_limit_per_cubic_meter":               {"zone", "size_um"},
		"cleanmon_zone_in_class":                             {"zone"},
		"cleanmon_zone_state":                                {"zone", "state"},
		"cleanmon_differential_pressure_pascals":             {"sensor", "high", "low"},
		"cleanmon_alarm_active":                              {"zone", "kind", "level"},
		"cleanmon_readings_total":                            {"counter", "result"},
		"cleanmon_instrument_last_reading_timestamp_seconds": {"counter"},
		"cleanmon_instrument_flow_liters_per_minute":         {"counter"},
	}
	descs := []*prometheus.Desc{descConcentration, descClassLimit, descInClass, descZoneState, descDP, descAlarmActive, descReadings, descCounterTime, descCounterFlow}
	for _, d := range descs {
		s := d.String()
		found := false
		for name, labels := range want {
			if strings.Contains(s, `fqName: "`+name+`"`) {
				found = true
				if !strings.Contains(s, "variableLabels: {"+strings.Join(labels, ",")+"}") {
					t.Errorf("%s: labels in %s, want %v", name, s, labels)
				}
				delete(want, name)
			}
		}
		if !found {
			t.Errorf("unexpected descriptor %s", s)
		}
	}
	if len(want) > 0 {
		t.Errorf("missing %v", slices.Collect(maps.Keys(want)))
	}
}

package daemon

import (
	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/collector"
	"cleanmon/store"
	"context"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
)

// (the map the pymodbus test server serves).
func modbusSite(t *testing.T, addr, data string) string {
	t.Helper()
	b, err := os.ReadFile("../../../../testdata/modbus-counter.yaml")
	if err != nil {
		t.Fatal(err)
	}
	const placeholder = `address: "127.0.0.1:5020"`
	if !strings.Contains(string(b), placeholder) {
		t.Fatal("testdata/modbus-counter.yaml no longer has the address placeholder")
	}
	counters := strings.Replace(string(b), placeholder, fmt.Sprintf("address: %q", addr), 1)
	site := fmt.Sprintf(`site: "Veldmark Photonics, building C (Modbus tests)"
data_dir: %q
access:
  open_reads: true
zones:
  - id: assembly
    name: "Assembly hall"
    class: 7
    operating_state: in-operation
    area_m2: 60
    sizes: ["0.5", "5"]
    stale_after: "3s"
    locations: [{id: asm-mb}]
`, data) + counters
	p := filepath.Join(t.TempDir(), "site.yaml")
	if err := os.WriteFile(p, []byte(site), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// startModbus polls a counter served by an in-process device into a real
// store, each sample once, and counts it in the daemon's metrics.
func TestStartModbusIntoStore(t *testing.T) {
	cfg, err := site.LoadFile(modbusSite(t, "127.0.0.1:5020", t.TempDir()))
	if err != nil {
		t.Fatal(err)
	}
	c := cfg.Counters[0]
	dev, err := collector.NewCounterSlave(c)
	if err != nil {
		t.Fatal(err)
	}
	if err := dev.Start("127.0.0.1:0"); err != nil {
		t.Fatal(err)
	}
	defer dev.Close()
	c.Modbus.Address = dev.Addr()
	st, err := store.Open(t.TempDir(), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	reg, err := collector.NewRegistry([]collector.Counter{c}, nil)
	if err != nil {
		t.Fatal(err)
	}
	in := collector.NewIngest(reg, storeSink{st: st}, collector.IngestOptions{})
	prom := prometheus.NewRegistry()
	stop, err := startModbus(context.Background(), reg, in, slog.New(slog.NewTextHandler(io.Discard, nil)), modbusHooks{Metrics: prom})
	if err != nil {
		t.Fatal(err)
	}
	defer stop()

	stored := func() []store.Reading {
		var rs []store.Reading
		if err := st.ScanReadings(c.ID, time.Time{}, time.Time{}, func(r store.Reading) error { rs = append(rs, r); return nil }); err != nil {
			t.Fatal(err)
		}
		return rs
	}
	polled := func(n float64) {
		deadline := time.Now().Add(5 * time.Second)
		for !strings.Contains(gatherText(t, prom), fmt.Sprintf(`cleanmon_modbus_polls_total{device="pc-mb-1",result="ok"} %g`, n)) {
			if time.Now().After(deadline) {
				t.Fatalf("no %g polls in 5 s:\n%s", n, gatherText(t, prom))
			}
			time.Sleep(20 * time.Millisecond)
		}
	}
	polled(2)
	const n = 3
	for i := 1; i <= n; i++ {
		vol := 0.4717
		raw := collector.RawReading{Counter: c.ID, Counts: map[string]collector.Count{"0.3": {N: uint64(90000 + i)}, "0.5": {N: uint64(70000 + i)}, "5": {N: uint64(i)}},
			FlowLPM: 28.3, SampleS: 1, VolumeL: &vol, Status: collector.StatusOK}
		if err := dev.PublishReading(raw); err != nil {
			t.Fatal(err)
		}
		deadline := time.Now().Add(5 * time.Second)
		for len(stored()) < i {
			if time.Now().After(deadline) {
				t.Fatalf("sample %d not stored in 5 s", i)
			}
			time.Sleep(20 * time.Millisecond)
		}
	}
	stop()
	rs := stored()
	if len(rs) != n {
		t.Fatalf("%d readings stored, want %d", len(rs), n)
	}
	for i, r := range rs {
		if r.Counts[0] != uint64(90001+i) || r.Counts[1] != uint64(70001+i) || r.Counts[2] != uint64(i+1) || r.FlowLPM != 28.3 {
			t.Errorf("reading %d: counts %v flow %g", i, r.Counts, r.FlowLPM)
		}
	}
	if !strings.Contains(gatherText(t, prom), fmt.Sprintf(`cleanmon_modbus_samples_total{device="pc-mb-1",result="accepted"} %d`, n)) {
		t.Errorf("samples metric:\n%s", gatherText(t, prom))
	}
}

func gatherText(t *testing.T, g prometheus.Gatherer) string {
	t.Helper()
	mfs, err := g.Gather()
	if err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	for _, mf := range mfs {
		for _, m := range mf.GetMetric() {
			var ls []string
			for _, l := range m.GetLabel() {
				ls = append(ls, fmt.Sprintf("%s=%q", l.GetName(), l.GetValue()))
			}
			v := m.GetCounter().GetValue() + m.GetGauge().GetValue()
			fmt.Fprintf(&b, "%s{%s} %g\n", mf.GetName(), strings.Join(ls, ","), v)
		}
	}
	return b.String()
}

// The demo with Modbus devices: the simulator's live readings go into the
// devices' registers, the poller reads them into the store with the
// simulated sample times, and DP samples still arrive directly.
func TestDemoModbusEndToEnd(t *testing.T) {
	cfg, err := site.Demo()
	if err != nil {
		t.Fatal(err)
	}
	const speed = 60 // a simulated minute, one sample of each counter, per second
	dm, err := startDemoModbus(cfg.Counters, speed)
	if err != nil {
		t.Fatal(err)
	}
	defer dm.Stop()
	if len(dm.Addrs) != len(cfg.Counters) {
		t.Fatalf("%d devices for %d counters", len(dm.Addrs), len(cfg.Counters))
	}
	now := speedClock(speed)
	reg, err := collector.NewRegistry(dm.Counters, cfg.PressureSensors)
	if err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(t.TempDir(), store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	in := collector.NewIngest(reg, storeSink{st: st}, collector.IngestOptions{Now: now})
	prom := prometheus.NewRegistry()
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	stop, err := startModbus(ctx, reg, in, slog.New(slog.NewTextHandler(io.Discard, nil)), modbusHooks{Metrics: prom, Now: now})
	if err != nil {
		t.Fatal(err)
	}
	defer stop()

	zones, err := alerts.NewZoneTracker(cfg.Zones, cfg.Bindings(), alerts.ZoneTrackerOptions{Now: now})
	if err != nil {
		t.Fatal(err)
	}
	limits := map[string]map[float64]float64{}
	for _, ci := range reg.Counters() {
		v, _ := zones.Zone(ci.Zone)
		limits[ci.ID] = map[float64]float64{}
		for _, l := range v.Limits {
			if l.Limit != nil {
				limits[ci.ID][l.SizeUM] = *l.Limit
			}
		}
	}
	sim, err := collector.NewSimulator(reg, limits, collector.SimOptions{Seed: demoSeed, Now: now, DropoutRate: -1})
	if err != nil {
		t.Fatal(err)
	}
	simDone := make(chan error, 1)
	go func() { simDone <- sim.Run(ctx, speed, dm.Feed(in)) }()

	// Three simulated minutes: at least two samples of every counter.
	deadline := time.Now().Add(15 * time.Second)
	for {
		short := ""
		for _, c := range dm.Counters {
			n := 0
			st.ScanReadings(c.ID, time.Time{}, time.Time{}, func(store.Reading) error { n++; return nil })
			if n < 2 {
				short = c.ID
			}
		}
		if short == "" {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("counter %s has fewer than 2 polled readings after 15 s", short)
		}
		time.Sleep(100 * time.Millisecond)
	}
	cancel()
	stop()
	if err := <-simDone; err != nil {
		t.Fatal(err)
	}
	for _, c := range dm.Counters {
		var prev time.Time
		st.ScanReadings(c.ID, time.Time{}, time.Time{}, func(r store.Reading) error {
			// The device carries the simulator's sample time, on its
			// one-minute grid.
			if !r.Time.Equal(r.Time.Truncate(time.Minute)) || !r.Time.After(prev) {
				t.Errorf("%s: reading at %s (previous %s)", c.ID, r.Time, prev)
			}
			prev = r.Time
			return nil
		})
	}
	text := gatherText(t, prom)
	for _, c := range dm.Counters {
		if regexp.MustCompile(`cleanmon_modbus_poll_errors_total\{device="` + c.ID + `"`).MatchString(text) {
			t.Errorf("poll errors for %s:\n%s", c.ID, text)
		}
	}
	n := 0
	for _, s := range cfg.PressureSensors {
		st.ScanPressure(s.ID, time.Time{}, time.Time{}, func(store.Pressure) error { n++; return nil })
	}
	if n == 0 {
		t.Error("no DP samples passed through the feed")
	}
}

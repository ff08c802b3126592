package collector

import (
	"context"
	"fmt"
	"io"
	"net"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/prometheus/common/model"
	"github.com/simonvetter/modbus"
)

// eventLog is a DeviceEvents that remembers every call.
type eventLog struct {
	mu     sync.Mutex
	events []string // "fault pc-x timeout", "recovered pc-x"
}

func (e *eventLog) Fault(id, reason string, t time.Time) {
	e.mu.Lock()
	defer e.mu.Unlock()
	e.events = append(e.events, "fault "+id+" "+reason)
}

func (e *eventLog) Recovered(id string, t time.Time) {
	e.mu.Lock()
	defer e.mu.Unlock()
	e.events = append(e.events, "recovered "+id)
}

func (e *eventLog) list() []string {
	e.mu.Lock()
	defer e.mu.Unlock()
	return append([]string(nil), e.events...)
}

func (e *eventLog) has(ev string) bool {
	for _, x := range e.list() {
		if x == ev {
			return true
		}
	}
	return false
}

// waitFor polls cond every 10 ms until it holds or the time is up.
func waitFor(t *testing.T, within time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(within)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("after %s: %s", within, what)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// rig is a poller over real Modbus TCP slaves on loopback, a real Ingest
// and an in-memory sink.
type rig struct {
	t      *testing.T
	sink   *memSink
	in     *Ingest
	poller *Poller
	events *eventLog
	prom   *prometheus.Registry
	slaves map[string]*ModbusSlave
	cancel context.CancelFunc
	done   chan struct{}
}

// newRig starts a slave for every instrument whose modbus address is
// empty, points the instrument at it, and starts polling.
func newRig(t *testing.T, cs []Counter, ss []Sensor, opt PollerOptions) *rig {
	t.Helper()
	return newRigPooled(t, cs, ss, opt, 0)
}

// newRigPooled is newRig with the poller on the ingest's pooled view when
// window is positive.
func newRigPooled(t *testing.T, cs []Counter, ss []Sensor, opt PollerOptions, window time.Duration) *rig {
	t.Helper()
	r := &rig{t: t, sink: newMemSink(), events: &eventLog{}, prom: prometheus.NewRegistry(), slaves: map[string]*ModbusSlave{}}
	for i := range cs {
		if cs[i].Modbus == nil || cs[i].Modbus.Address != "" {
			continue
		}
		s, err := NewCounterSlave(cs[i])
		if err != nil {
			t.Fatal(err)
		}
		r.serve(cs[i].ID, s)
		m := *cs[i].Modbus
		m.Address = s.Addr()
		cs[i].Modbus = &m
	}
	for i := range ss {
		if ss[i].Modbus == nil || ss[i].Modbus.Address != "" {
			continue
		}
		s, err := NewSensorSlave(ss[i])
		if err != nil {
			t.Fatal(err)
		}
		r.serve(ss[i].ID, s)
		m := *ss[i].Modbus
		m.Address = s.Addr()
		ss[i].Modbus = &m
	}
	reg, err := NewRegistry(cs, ss)
	if err != nil {
		t.Fatal(err)
	}
	r.in = NewIngest(reg, r.sink, IngestOptions{Coalesce: window})
	opt.Events, opt.Metrics = r.events, r.prom
	var sub Submitter = r.in
	if window > 0 {
		sub = r.in.Pooled()
	}
	r.poller, err = NewPoller(reg, sub, opt)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	r.cancel, r.done = cancel, make(chan struct{})
	go func() {
		defer close(r.done)
		r.poller.Run(ctx)
	}()
	t.Cleanup(r.stop)
	return r
}

// startSlave serves c on loopback and points c at it.
func startSlave(t *testing.T, c *Counter) *ModbusSlave {
	t.Helper()
	s, err := NewCounterSlave(*c)
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Start("127.0.0.1:0"); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	m := *c.Modbus
	m.Address = s.Addr()
	c.Modbus = &m
	return s
}

func (r *rig) serve(id string, s *ModbusSlave) {
	if err := s.Start("127.0.0.1:0"); err != nil {
		r.t.Fatal(err)
	}
	r.slaves[id] = s
	r.t.Cleanup(func() { s.Close() })
}

// stop ends polling and waits for Run to return (bounded).
func (r *rig) stop() {
	r.cancel()
	select {
	case <-r.done:
	case <-time.After(10 * time.Second):
		r.t.Errorf("poller did not stop within 10 s")
	}
}

// readings returns the stored readings of a counter in commit order.
func (r *rig) readings(counter string) []Reading {
	r.sink.mu.Lock()
	defer r.sink.mu.Unlock()
	var out []Reading
	for _, k := range r.sink.order {
		if k.id == counter {
			out = append(out, r.sink.readings[k])
		}
	}
	return out
}

func (r *rig) metric(name, device, label string) float64 {
	var c prometheus.Collector
	switch name {
	case "polls":
		c = r.poller.metrics.polls.WithLabelValues(device, label)
	case "errors":
		c = r.poller.metrics.errs.WithLabelValues(device, label)
	case "samples":
		c = r.poller.metrics.sampled.WithLabelValues(device, label)
	}
	return testutil.ToFloat64(c)
}

// polls waits until the device has been polled n more times.
func (r *rig) polls(device string, n int) {
	r.t.Helper()
	start := r.metric("polls", device, "ok") + r.metric("polls", device, "error")
	waitFor(r.t, 5*time.Second, fmt.Sprintf("%d polls of %s", n, device), func() bool {
		return r.metric("polls", device, "ok")+r.metric("polls", device, "error") >= start+float64(n)
	})
}

// goodSample is the i-th reading of a test counter (sizes 0.5, 1, 5 µm)
// sampling 1 s at 28.3 L/min, which is 0.4717 L.
func goodSample(id string, i int) RawReading {
	return RawReading{Counter: id, Counts: map[string]Count{"0.5": {N: uint64(1000 + i)}, "1": {N: uint64(300 + i)}, "5": {N: uint64(i % 7)}},
		FlowLPM: 28.3, SampleS: 1, VolumeL: f64(0.4717), Status: StatusOK}
}

func (r *rig) publish(id string, raw RawReading) {
	r.t.Helper()
	if err := r.slaves[id].PublishReading(raw); err != nil {
		r.t.Fatal(err)
	}
}

// The poller stores each finished sample once, however often it polls,
// with every value as the counter showed it, reads the whole contiguous
// map in one request, and counts it all in its metrics.
func TestModbusPollerStoresEachSampleOnce(t *testing.T) {
	c := mbCounter()
	var mu sync.Mutex
	var reqs []string
	s := startSlave(t, &c)
	s.hook = func(input bool, addr, n uint16) error {
		mu.Lock()
		defer mu.Unlock()
		reqs = append(reqs, fmt.Sprintf("%s %d+%d", typeName(input), addr, n))
		return nil
	}
	r := newRig(t, []Counter{c}, nil, PollerOptions{})
	r.slaves[c.ID] = s
	r.polls(c.ID, 2) // the sample on display at start is the baseline
	const n = 5
	for i := 1; i <= n; i++ {
		r.publish(c.ID, goodSample(c.ID, i))
		waitFor(t, 5*time.Second, fmt.Sprintf("sample %d stored", i), func() bool { return len(r.readings(c.ID)) == i })
		r.polls(c.ID, 3) // more polls see the same sample number
	}
	got := r.readings(c.ID)
	if len(got) != n {
		t.Fatalf("%d readings stored, want %d", len(got), n)
	}
	for i, rd := range got {
		want := goodSample(c.ID, i+1)
		for ch, key := range []string{"0.5", "1", "5"} {
			if rd.Counts[ch] != want.Counts[key].N {
				t.Errorf("reading %d: %s µm count %d, want %d", i+1, key, rd.Counts[ch], want.Counts[key].N)
			}
		}
		if abs(rd.FlowLPM-28.3) > 1e-9 || rd.SampleSeconds != 1 || abs(rd.VolumeL-0.4717) > 1e-9 || rd.Status != StatusOK {
			t.Errorf("reading %d: flow %g, sample_s %g, volume %g, status %s", i+1, rd.FlowLPM, rd.SampleSeconds, rd.VolumeL, rd.Status)
		}
		if i > 0 && !rd.Time.After(got[i-1].Time) {
			t.Errorf("reading %d at %s is not after reading %d at %s", i+1, rd.Time, i, got[i-1].Time)
		}
	}
	mu.Lock()
	for _, q := range reqs {
		if q != "input 0+13" {
			t.Errorf("request %q: the contiguous map (input 0–12) must be one read", q)
		}
	}
	nreq := len(reqs)
	mu.Unlock()
	if polls := r.metric("polls", c.ID, "ok"); float64(nreq) != polls {
		t.Errorf("%d requests for %g polls: want one request per poll", nreq, polls)
	}
	if a, d, m := r.metric("samples", c.ID, "accepted"), r.metric("samples", c.ID, "duplicate"), r.metric("samples", c.ID, "missed"); a != n || d != 0 || m != 0 {
		t.Errorf("samples metric: accepted %g duplicate %g missed %g, want %d 0 0", a, d, m, n)
	}
	if e := r.metric("polls", c.ID, "error"); e != 0 {
		t.Errorf("%g failed polls", e)
	}
	last := testutil.ToFloat64(r.poller.metrics.last.WithLabelValues(c.ID))
	if now := float64(time.Now().Unix()); last < now-10 || last > now+1 {
		t.Errorf("last success %g, now %g", last, now)
	}
	if probs, err := testutil.GatherAndLint(r.prom); err != nil || len(probs) > 0 {
		t.Errorf("metric lint: %v %v", probs, err)
	}
	if st := r.poller.Devices()[0]; st.State != DeviceOK || st.Sample != n || st.LastError != "" {
		t.Errorf("device status %+v", st)
	}
	if ev := r.events.list(); len(ev) != 0 {
		t.Errorf("events on a healthy counter: %v", ev)
	}
}

// With the map in two blocks, a sample that finishes between the reads
// is not stored torn: the poll is dropped and the next one reads the new
// sample whole.
func TestModbusPollerTornSample(t *testing.T) {
	c := mbCounter()
	c.Modbus.Address = ""
	c.Modbus.Status.Type = RegHolding
	c.Modbus.Status.Addr = ip(0)
	// sample i shows status warning when i is odd, so a torn read would
	// pair a count with the wrong status.
	sample := func(i int) RawReading {
		raw := goodSample(c.ID, i)
		if i%2 == 1 {
			raw.Status = StatusWarning
		}
		return raw
	}
	r := newRig(t, []Counter{c}, nil, PollerOptions{})
	s := r.slaves[c.ID]
	r.polls(c.ID, 2)
	r.publish(c.ID, sample(1))
	waitFor(t, 5*time.Second, "sample 1 stored", func() bool { return len(r.readings(c.ID)) == 1 })

	next, err := s.prepare(sample(3))
	if err != nil {
		t.Fatal(err)
	}
	var fired atomic.Bool
	s.mu.Lock()
	s.hook = func(input bool, addr, n uint16) error {
		// While the status is being read, sample 3 finishes.
		if !input && fired.CompareAndSwap(false, true) {
			s.apply(next)
			s.advance()
		}
		return nil
	}
	s.mu.Unlock()
	r.publish(c.ID, sample(2))
	waitFor(t, 5*time.Second, "sample 3 stored", func() bool { return len(r.readings(c.ID)) == 2 })
	r.polls(c.ID, 3)
	got := r.readings(c.ID)
	if len(got) != 2 || got[1].Counts[0] != 1003 || got[1].Status != StatusWarning {
		t.Fatalf("stored %d readings, the last %v %s; want sample 3 (1003, warning)", len(got), got[len(got)-1].Counts, got[len(got)-1].Status)
	}
	if m := r.metric("samples", c.ID, "missed"); m != 1 {
		t.Errorf("missed %g, want 1 (sample 2 was replaced while it was read)", m)
	}
}

// Every fault: the counter is marked with its reason, nothing wrong is
// stored, and a good sample afterwards is stored and clears the mark.
func TestModbusPollerFaults(t *testing.T) {
	type rigSlave struct {
		r *rig
		s *ModbusSlave
		c Counter
	}
	poke := func(rs rigSlave, f func(s *ModbusSlave)) {
		rs.s.mu.Lock()
		defer rs.s.mu.Unlock()
		f(rs.s)
	}
	cases := []struct {
		name   string
		reason string
		induce func(rs rigSlave)
		fix    func(rs rigSlave)
	}{
		{"connection refused", ReasonConnect,
			func(rs rigSlave) { rs.s.Close() },
			func(rs rigSlave) {
				if err := rs.s.Start(rs.c.Modbus.Address); err != nil {
					rs.r.t.Fatal(err)
				}
			}},
		{"timeout", ReasonTimeout,
			func(rs rigSlave) {
				poke(rs, func(s *ModbusSlave) {
					s.hook = func(bool, uint16, uint16) error { time.Sleep(250 * time.Millisecond); return nil }
				})
			},
			func(rs rigSlave) { poke(rs, func(s *ModbusSlave) { s.hook = nil }) }},
		{"exception response", ReasonException,
			func(rs rigSlave) {
				poke(rs, func(s *ModbusSlave) {
					s.hook = func(bool, uint16, uint16) error { return modbus.ErrServerDeviceBusy }
				})
			},
			func(rs rigSlave) { poke(rs, func(s *ModbusSlave) { s.hook = nil }) }},
		{"counter restarts", ReasonRestart,
			func(rs rigSlave) {
				poke(rs, func(s *ModbusSlave) {
					s.sample = 0
					s.plan.sample.put(s.input, 0)
				})
			}, nil},
		{"counts beyond the counter's maximum", ReasonImplausible,
			func(rs rigSlave) {
				// 60 000 particles in 0.4717 L is 1.27e8/m³, beyond ten
				// times the counter's 1e7/m³.
				raw := goodSample(rs.c.ID, 50)
				raw.Counts["0.5"] = Count{N: 60000}
				rs.r.publish(rs.c.ID, raw)
			}, nil},
		{"all-ones marker", ReasonImplausible,
			func(rs rigSlave) {
				raw := goodSample(rs.c.ID, 50)
				raw.Counts["5"] = Count{N: 0xFFFFFFFF}
				rs.r.publish(rs.c.ID, raw)
			}, nil},
		{"flow zero", ReasonFlowZero,
			func(rs rigSlave) {
				raw := goodSample(rs.c.ID, 50)
				raw.FlowLPM = 0
				rs.r.publish(rs.c.ID, raw)
			}, nil},
		{"zero volume", ReasonImplausible,
			func(rs rigSlave) {
				raw := goodSample(rs.c.ID, 50)
				raw.VolumeL = f64(0)
				rs.r.publish(rs.c.ID, raw)
			}, nil},
		{"status value not in the map", ReasonStatus,
			func(rs rigSlave) {
				poke(rs, func(s *ModbusSlave) {
					s.plan.status.put(s.input, 7)
					s.advance()
				})
			}, nil},
		{"refused by validation", ReasonRejected,
			func(rs rigSlave) {
				// Cumulative counts cannot grow with size.
				raw := goodSample(rs.c.ID, 50)
				raw.Counts["1"] = Count{N: 5000}
				rs.r.publish(rs.c.ID, raw)
			}, nil},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := mbCounter()
			c.Modbus.Address = ""
			c.MaxPerM3 = 1e7
			r := newRig(t, []Counter{c}, nil, PollerOptions{MaxBackoff: 400 * time.Millisecond})
			rs := rigSlave{r, r.slaves[c.ID], c}
			rs.c.Modbus = r.in.Registry().counters[c.ID].Modbus
			r.polls(c.ID, 2)
			r.publish(c.ID, goodSample(c.ID, 1))
			waitFor(t, 5*time.Second, "first sample stored", func() bool { return len(r.readings(c.ID)) == 1 })

			tc.induce(rs)
			want := "fault " + c.ID + " " + tc.reason
			waitFor(t, 5*time.Second, want, func() bool { return r.events.has(want) })
			if st := r.poller.Devices()[0]; st.State != DeviceFault || st.Reason != tc.reason || st.LastError == "" {
				t.Errorf("device status %+v", st)
			}
			if e := r.metric("errors", c.ID, tc.reason); e < 1 {
				t.Errorf("poll errors{reason=%s} = %g", tc.reason, e)
			}
			if n := len(r.readings(c.ID)); n != 1 {
				t.Fatalf("%d readings stored during the fault, want none beyond the first", n-1)
			}
			if tc.fix != nil {
				tc.fix(rs)
			}
			r.publish(c.ID, goodSample(c.ID, 2))
			waitFor(t, 5*time.Second, "recovery", func() bool { return r.events.has("recovered " + c.ID) })
			got := r.readings(c.ID)
			if len(got) != 2 || got[1].Counts[0] != 1002 {
				t.Fatalf("after recovery %d readings, want the first and sample 2", len(got))
			}
			if st := r.poller.Devices()[0]; st.State != DeviceOK {
				t.Errorf("after recovery: %+v", st)
			}
			if ev := r.events.list(); len(ev) != 2 {
				t.Errorf("events %v, want one fault and one recovery", ev)
			}
		})
	}
}

// A store failure is not the counter's fault: no event, and the sample
// is read again and stored once the store works.
func TestModbusPollerCommitFailure(t *testing.T) {
	c := mbCounter()
	c.Modbus.Address = ""
	r := newRig(t, []Counter{c}, nil, PollerOptions{})
	r.polls(c.ID, 2)
	r.sink.mu.Lock()
	r.sink.fail = errDiskFull
	r.sink.mu.Unlock()
	r.publish(c.ID, goodSample(c.ID, 1))
	waitFor(t, 5*time.Second, "commit errors", func() bool { return r.metric("errors", c.ID, ReasonCommit) >= 2 })
	r.sink.mu.Lock()
	r.sink.fail = nil
	r.sink.mu.Unlock()
	waitFor(t, 5*time.Second, "sample stored after the store came back", func() bool { return len(r.readings(c.ID)) == 1 })
	r.polls(c.ID, 3)
	if got := r.readings(c.ID); len(got) != 1 || got[0].Counts[0] != 1001 {
		t.Fatalf("stored %v", got)
	}
	if ev := r.events.list(); len(ev) != 0 {
		t.Errorf("events for a store failure: %v", ev)
	}
}

// A fault status is the instrument's own verdict on a reading: the
// reading is stored with it, as a pushed one is, and the alarm engine
// judges it; the poller raises nothing.
func TestModbusPollerFaultStatusIsStored(t *testing.T) {
	c := mbCounter()
	c.Modbus.Address = ""
	r := newRig(t, []Counter{c}, nil, PollerOptions{})
	r.polls(c.ID, 2)
	raw := goodSample(c.ID, 1)
	raw.Status = StatusFault
	r.publish(c.ID, raw)
	waitFor(t, 5*time.Second, "reading stored", func() bool { return len(r.readings(c.ID)) == 1 })
	if got := r.readings(c.ID)[0]; got.Status != StatusFault {
		t.Errorf("status %q, want fault", got.Status)
	}
	if ev := r.events.list(); len(ev) != 0 {
		t.Errorf("events %v", ev)
	}
}

// Between the counter's maximum and ten times it, counts are stored and
// flagged over range, as pushed ones are (ISO 21501-4: flagged, not
// trusted).
func TestModbusPollerOverRangeIsFlagged(t *testing.T) {
	c := mbCounter()
	c.Modbus.Address = ""
	c.MaxPerM3 = 1e7
	r := newRig(t, []Counter{c}, nil, PollerOptions{})
	r.polls(c.ID, 2)
	raw := goodSample(c.ID, 1)
	raw.Counts["0.5"] = Count{N: 6000} // 6000 / 0.4717 L = 1.27e7/m³: above 1e7, below 1e8
	r.publish(c.ID, raw)
	waitFor(t, 5*time.Second, "reading stored", func() bool { return len(r.readings(c.ID)) == 1 })
	if got := r.readings(c.ID)[0]; !got.OverRange {
		t.Errorf("reading at %g/m³ not flagged over range", got.PerM3[0])
	}
}

// With a time register, readings carry the counter's time, and a second
// poller (a restarted daemon) reads the sample on display again, which
// the store takes as a duplicate.
func TestModbusPollerDeviceTime(t *testing.T) {
	c := mbCounter()
	c.Modbus.Address = ""
	c.Modbus.Time = r32(13)
	r := newRig(t, []Counter{c}, nil, PollerOptions{})
	r.polls(c.ID, 2)
	if n := len(r.readings(c.ID)); n != 0 {
		t.Fatalf("%d readings before the counter finished a sample", n)
	}
	at := time.Now().UTC().Truncate(time.Second).Add(-30 * time.Second)
	raw := goodSample(c.ID, 1)
	raw.Time = at.Format(time.RFC3339)
	r.publish(c.ID, raw)
	waitFor(t, 5*time.Second, "reading stored", func() bool { return len(r.readings(c.ID)) == 1 })
	if got := r.readings(c.ID)[0]; !got.Time.Equal(at) {
		t.Errorf("time %s, want the counter's %s", got.Time, at)
	}
	r.stop()

	reg := r.in.Registry()
	p2, err := NewPoller(reg, r.in, PollerOptions{Metrics: prometheus.NewRegistry()})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() { defer close(done); p2.Run(ctx) }()
	waitFor(t, 5*time.Second, "the restarted poller sees the duplicate", func() bool {
		return testutil.ToFloat64(p2.metrics.sampled.WithLabelValues(c.ID, sampleDuplicate)) == 1
	})
	cancel()
	<-done
	if n := len(r.readings(c.ID)); n != 1 {
		t.Errorf("%d readings after the restart, want 1", n)
	}
}

// A pulled plug: attempts back off while the counter is away, and polling
// resumes at its normal rate once it answers again.
func TestModbusPollerBackoffAndResume(t *testing.T) {
	c := mbCounter()
	c.Modbus.Address = ""
	r := newRig(t, []Counter{c}, nil, PollerOptions{MaxBackoff: 800 * time.Millisecond})
	s := r.slaves[c.ID]
	r.polls(c.ID, 2)
	addr := s.Addr()
	s.Close()
	time.Sleep(2 * time.Second)
	// At a 100 ms poll, 2 s are 20 attempts; backing off (100, 200, 400,
	// then 800 ms) makes about 6.
	attempts := r.metric("errors", c.ID, ReasonConnect)
	if attempts < 3 || attempts > 10 {
		t.Errorf("%g connection attempts in 2 s of outage, want 3–10 with backoff", attempts)
	}
	if err := s.Start(addr); err != nil {
		t.Fatal(err)
	}
	r.publish(c.ID, goodSample(c.ID, 1))
	waitFor(t, 3*time.Second, "sample after the plug is back", func() bool { return len(r.readings(c.ID)) == 1 })
	before := r.metric("polls", c.ID, "ok")
	time.Sleep(time.Second)
	if n := r.metric("polls", c.ID, "ok") - before; n < 5 {
		t.Errorf("%g polls in the second after recovery, want about 10 at a 100 ms poll", n)
	}
	if !r.events.has("fault "+c.ID+" "+ReasonConnect) || !r.events.has("recovered "+c.ID) {
		t.Errorf("events %v", r.events.list())
	}
}

// A device that never answers in time does not hold up another one.
func TestModbusPollerSlowDeviceDelaysNoOther(t *testing.T) {
	slow, fast := mbCounter(), mbCounter()
	slow.ID, slow.Location, fast.ID, fast.Location = "pc-slow", "slow", "pc-fast", "fast"
	slow.Modbus.Address, fast.Modbus.Address = "", ""
	r := newRig(t, []Counter{slow, fast}, nil, PollerOptions{MaxConns: 2})
	r.slaves["pc-slow"].mu.Lock()
	r.slaves["pc-slow"].hook = func(bool, uint16, uint16) error { time.Sleep(300 * time.Millisecond); return nil }
	r.slaves["pc-slow"].mu.Unlock()
	r.polls("pc-fast", 2)
	for i := 1; i <= 5; i++ {
		r.publish("pc-fast", goodSample("pc-fast", i))
		// The fast counter polls every 100 ms; one poll and a margin.
		waitFor(t, time.Second, fmt.Sprintf("fast sample %d", i), func() bool { return len(r.readings("pc-fast")) == i })
	}
	if e := r.metric("errors", "pc-slow", ReasonTimeout); e < 1 {
		t.Errorf("the slow counter never timed out (%g)", e)
	}
}

// countingProxy forwards TCP connections to target and counts them.
type countingProxy struct {
	ln       net.Listener
	accepted atomic.Int32
}

func startProxy(t *testing.T, target string) *countingProxy {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	p := &countingProxy{ln: ln}
	t.Cleanup(func() { ln.Close() })
	go func() {
		for {
			in, err := ln.Accept()
			if err != nil {
				return
			}
			p.accepted.Add(1)
			go pipe(in, target)
		}
	}()
	return p
}

func pipe(in net.Conn, target string) {
	defer in.Close()
	out, err := net.Dial("tcp", target)
	if err != nil {
		return
	}
	defer out.Close()
	done := make(chan struct{}, 2)
	go func() { io.Copy(out, in); done <- struct{}{} }()
	go func() { io.Copy(in, out); done <- struct{}{} }()
	<-done
}

// More devices than connections: each poll connects and disconnects, and
// no more than MaxConns requests are ever answered at once, though every
// device would keep a connection busy 80 % of the time; every device is
// read all the same.
func TestModbusPollerConnectionBound(t *testing.T) {
	var busy, most atomic.Int32
	slowAnswer := func(bool, uint16, uint16) error {
		n := busy.Add(1)
		defer busy.Add(-1)
		for m := most.Load(); n > m && !most.CompareAndSwap(m, n); m = most.Load() {
		}
		// Hold the request until a second one is in flight (bounded), so
		// the bound is reached however slowly the machine schedules us.
		for end := time.Now().Add(150 * time.Millisecond); busy.Load() < 2 && time.Now().Before(end); {
			time.Sleep(2 * time.Millisecond)
		}
		time.Sleep(20 * time.Millisecond)
		return nil
	}
	var cs []Counter
	var slaves []*ModbusSlave
	var proxies []*countingProxy
	for i := 0; i < 4; i++ {
		c := mbCounter()
		c.ID, c.Location = fmt.Sprintf("pc-%d", i), fmt.Sprintf("loc-%d", i)
		c.Interval, c.Modbus.Poll, c.Modbus.Timeout = model.Duration(2*time.Second), model.Duration(time.Second), model.Duration(time.Second) // a slow machine is not a failed poll
		s := startSlave(t, &c)
		s.hook = slowAnswer
		p := startProxy(t, s.Addr())
		c.Modbus.Address = p.ln.Addr().String()
		cs, slaves, proxies = append(cs, c), append(slaves, s), append(proxies, p)
	}
	r := newRig(t, cs, nil, PollerOptions{MaxConns: 2})
	if r.poller.persist {
		t.Fatal("4 devices over 2 connections must not keep them open")
	}
	for _, c := range cs {
		r.polls(c.ID, 1)
	}
	for i, s := range slaves {
		if err := s.PublishReading(goodSample(cs[i].ID, 1)); err != nil {
			t.Fatal(err)
		}
	}
	for _, c := range cs {
		waitFor(t, 5*time.Second, "sample of "+c.ID, func() bool { return len(r.readings(c.ID)) == 1 })
	}
	if m := most.Load(); m != 2 {
		t.Errorf("at most %d requests answered at once, want 2 (the bound, reached)", m)
	}
	for i, p := range proxies {
		if n := p.accepted.Load(); n < 2 {
			t.Errorf("device %d: %d connections: want one per poll", i, n)
		}
	}
	for _, c := range cs {
		if e := r.metric("polls", c.ID, "error"); e != 0 {
			t.Errorf("%s: %g failed polls", c.ID, e)
		}
	}
}

// A DP sensor is read at every poll; the value is signed and scaled, and
// a fault status stores nothing.
func TestModbusPollerSensor(t *testing.T) {
	s := mbSensor()
	s.Modbus.Address = ""
	s.Modbus.Poll = model.Duration(100 * time.Millisecond)
	r := newRig(t, nil, []Sensor{s}, PollerOptions{})
	if err := r.slaves[s.ID].PublishPressure(-3.5); err != nil {
		t.Fatal(err)
	}
	waitFor(t, 5*time.Second, "3 DP samples", func() bool { _, p := r.sink.stored(); return p >= 3 })
	r.sink.mu.Lock()
	for k, p := range r.sink.pressure {
		if p.Pa != 0 && abs(p.Pa+3.5) > 1e-9 {
			t.Errorf("%v: %g Pa, want -3.5 (or 0 before the first value)", k, p.Pa)
		}
	}
	r.sink.mu.Unlock()
	sl := r.slaves[s.ID]
	sl.mu.Lock()
	sl.plan.status.put(sl.input, 1) // fault
	sl.mu.Unlock()
	waitFor(t, 5*time.Second, "status fault", func() bool { return r.events.has("fault " + s.ID + " " + ReasonStatus) })
	_, before := r.sink.stored()
	r.polls(s.ID, 3)
	if _, after := r.sink.stored(); after != before {
		t.Errorf("%d DP samples stored while the sensor reported a fault", after-before)
	}
}

// Label values stay within the configured devices and reasons.
func TestModbusMetricsBounded(t *testing.T) {
	c := mbCounter()
	c.Modbus.Address = ""
	r := newRig(t, []Counter{c}, nil, PollerOptions{})
	r.polls(c.ID, 2)
	r.slaves[c.ID].Close()
	waitFor(t, 5*time.Second, "a connection error", func() bool { return r.metric("errors", c.ID, ReasonConnect) >= 1 })
	mfs, err := r.prom.Gather()
	if err != nil {
		t.Fatal(err)
	}
	reasons := map[string]bool{ReasonConnect: true, ReasonTimeout: true, ReasonException: true, ReasonProtocol: true, ReasonRestart: true,
		ReasonImplausible: true, ReasonFlowZero: true, ReasonStatus: true, ReasonRejected: true, ReasonCommit: true,
		"ok": true, "error": true, sampleAccepted: true, sampleDuplicate: true, sampleMissed: true}
	var names []string
	for _, mf := range mfs {
		names = append(names, mf.GetName())
		for _, m := range mf.GetMetric() {
			for _, l := range m.GetLabel() {
				switch l.GetName() {
				case "device":
					if l.GetValue() != c.ID {
						t.Errorf("%s: device %q", mf.GetName(), l.GetValue())
					}
				case "reason", "result":
					if !reasons[l.GetValue()] {
						t.Errorf("%s: %s %q", mf.GetName(), l.GetName(), l.GetValue())
					}
				}
			}
		}
	}
	sort.Strings(names)
	want := "cleanmon_modbus_last_success_timestamp_seconds cleanmon_modbus_poll_errors_total cleanmon_modbus_polls_total cleanmon_modbus_samples_total"
	if strings.Join(names, " ") != want {
		t.Errorf("metrics %v, want %s", names, want)
	}
}

func TestNewPollerRefusesDoubleRegistration(t *testing.T) {
	c := mbCounter()
	reg, err := NewRegistry([]Counter{c}, nil)
	if err != nil {
		t.Fatal(err)
	}
	prom := prometheus.NewRegistry()
	if _, err := NewPoller(reg, NewIngest(reg, newMemSink(), IngestOptions{}), PollerOptions{Metrics: prom}); err != nil {
		t.Fatal(err)
	}
	if _, err := NewPoller(reg, NewIngest(reg, newMemSink(), IngestOptions{}), PollerOptions{Metrics: prom}); err == nil {
		t.Error("second poller registered the same metrics")
	}
}

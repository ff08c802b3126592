package daemon

import (
	"context"
	"errors"
	"log/slog"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"sync"
	"time"

	"cleanmon/alerts/investigate"
	"cleanmon/collector"
	"cleanmon/store"
)

// The demo stages incidents of known cause on the assembly hall, one every
// demoIncidentEvery, the four causes in turn (a door held open, a fan
// failure, a counter fault, a neighbour's excursion): a few of each a day.
// Each is investigate.SimulateIncident's record, poured into the demo's
// own instruments in place of the simulator's data of its window, so that
// the daemon raises real alarms from it and an alarm's investigation page
// can be checked against the cause that was staged. The cause is logged
// ("demo incident staged") and DemoIncidents recomputes the schedule.

const (
	demoIncidentEvery = 2 * time.Hour
	// demoIncidentAt is the alarm's place in its slot: the window (an hour
	// before, half an hour after) stays inside the slot.
	demoIncidentAt = 75 * time.Minute
	// demoConcScale lifts the staged concentrations to the demo's levels:
	// assembly's background near its simulator's, the rises past its
	// action level. A constant factor leaves every robust deviation as it
	// was (they are taken on a log scale).
	demoConcScale = 4
	// demoConcScale5 does the same at 5 µm, where the staged background
	// stands higher against 0.5 µm than the simulator's does.
	demoConcScale5 = 0.8
)

// Channel ratios of the class formula, (0.5/D)^2.08 (ISO 14644-1:2015
// clause 3 formula), for the channels a staged series does not give.
var demoRatio = map[string]float64{"0.3": 2.9, "1": 0.237, "5": 0.0083}

// DemoIncident is one staged incident: its true cause, when the cause
// began, when its alarm was staged to begin, and the window replaced.
type DemoIncident struct {
	Cause    investigate.Cause
	Location string
	Onset    time.Time
	Alarm    time.Time
	From, To time.Time
}

func demoSlot(t time.Time) int64 { return t.Unix() / int64(demoIncidentEvery/time.Second) }

func demoIncident(k int64) investigate.Incident {
	alarm := time.Unix(k*int64(demoIncidentEvery/time.Second), 0).UTC().Add(demoIncidentAt)
	rng := rand.New(rand.NewPCG(demoSeed, uint64(k)))
	return investigate.SimulateIncident(rng, investigate.Causes[int(k%int64(len(investigate.Causes)))], alarm)
}

// DemoIncidents lists the incidents the demo stages whose alarms fall in
// [from, to).
func DemoIncidents(from, to time.Time) []DemoIncident {
	var out []DemoIncident
	for k := demoSlot(from) - 1; k <= demoSlot(to); k++ {
		inc := demoIncident(k)
		if inc.Input.AlarmTime.Before(from) || !inc.Input.AlarmTime.Before(to) {
			continue
		}
		out = append(out, DemoIncident{Cause: inc.Cause, Location: inc.Input.AlarmLocation, Onset: inc.Onset, Alarm: inc.Input.AlarmTime,
			From: inc.Input.From, To: inc.Input.To})
	}
	return out
}

// staged is one incident as samples of the demo's instruments.
type staged struct {
	DemoIncident
	readings []collector.RawReading
	pressure []collector.RawPressure
	times    []time.Time // of readings
	ptimes   []time.Time // of pressure
	logged   bool
}

// incidentFeed sits between the simulator and the ingest path: it drops
// the simulator's data of the instruments an incident replaces within its
// window, and hands on the incident's samples once the simulator has
// reached their time.
type incidentFeed struct {
	mu       sync.Mutex
	next     collector.Submitter
	log      *slog.Logger
	counters map[string]bool    // replaced counters
	sensors  map[string]float64 // replaced sensors → the simulator's nominal DP
	nominal  map[string]float64 // counter → nominal flow
	slots    map[int64]*staged
	readTo   time.Time // incident readings up to here were handed on
	dpTo     time.Time
}

func newIncidentFeed(next collector.Submitter, reg *collector.Registry, log *slog.Logger) *incidentFeed {
	f := &incidentFeed{next: next, log: log, counters: map[string]bool{}, sensors: map[string]float64{}, nominal: map[string]float64{},
		slots: map[int64]*staged{}}
	for _, c := range reg.Counters() {
		if c.Zone == "assembly" || c.Zone == "gowning" || c.Zone == "metrology" {
			f.counters[c.ID] = true
			f.nominal[c.ID] = c.FlowLPM
		}
	}
	for _, s := range reg.Sensors() {
		if s.High == "assembly" || s.Low == "assembly" {
			f.sensors[s.ID] = s.MinPa + 7 // the simulator's level
		}
	}
	return f
}

func (f *incidentFeed) slot(k int64) *staged {
	if s, ok := f.slots[k]; ok {
		return s
	}
	for old := range f.slots {
		if old < k-2 {
			delete(f.slots, old)
		}
	}
	inc := demoIncident(k)
	s := &staged{DemoIncident: DemoIncident{Cause: inc.Cause, Location: inc.Input.AlarmLocation, Onset: inc.Onset,
		Alarm: inc.Input.AlarmTime, From: inc.Input.From, To: inc.Input.To}}
	f.pour(s, &inc.Input)
	f.slots[k] = s
	return s
}

// inWindow tells whether t lies in the window of the incident of its slot.
func (f *incidentFeed) inWindow(t time.Time) bool {
	s := f.slot(demoSlot(t))
	return !t.Before(s.From) && !t.After(s.To)
}

// SubmitReadings implements collector.Submitter.
func (f *incidentFeed) SubmitReadings(ctx context.Context, raws []collector.RawReading) (collector.Result, error) {
	f.mu.Lock()
	var out []collector.RawReading
	var first, last time.Time
	for _, r := range raws {
		t, err := time.Parse(time.RFC3339Nano, r.Time)
		if err != nil {
			out = append(out, r) // the ingest path refuses it, naming it
			continue
		}
		first, last = earliest(first, t), latest(last, t)
		if !(f.counters[r.Counter] && f.inWindow(t)) {
			out = append(out, r)
		}
	}
	f.due(&f.readTo, first, last, func(s *staged) []time.Time { return s.times },
		func(s *staged, i int) { out = append(out, s.readings[i]) })
	next := f.next
	f.mu.Unlock()
	if len(out) == 0 {
		return collector.Result{}, nil
	}
	return next.SubmitReadings(ctx, out)
}

// SubmitPressure implements collector.Submitter.
func (f *incidentFeed) SubmitPressure(ctx context.Context, raws []collector.RawPressure) (collector.Result, error) {
	f.mu.Lock()
	var out []collector.RawPressure
	var first, last time.Time
	for _, p := range raws {
		t, err := time.Parse(time.RFC3339Nano, p.Time)
		if err != nil {
			out = append(out, p)
			continue
		}
		first, last = earliest(first, t), latest(last, t)
		if _, ok := f.sensors[p.Sensor]; !(ok && f.inWindow(t)) {
			out = append(out, p)
		}
	}
	f.due(&f.dpTo, first, last, func(s *staged) []time.Time { return s.ptimes },
		func(s *staged, i int) { out = append(out, s.pressure[i]) })
	next := f.next
	f.mu.Unlock()
	if len(out) == 0 {
		return collector.Result{}, nil
	}
	return next.SubmitPressure(ctx, out)
}

// due hands on (through add) the staged samples with times in
// (*cursor, last] and moves the cursor; the first call starts at first,
// the start of the simulator's data.
func (f *incidentFeed) due(cursor *time.Time, first, last time.Time, times func(*staged) []time.Time, add func(*staged, int)) {
	if last.IsZero() {
		return
	}
	if cursor.IsZero() {
		*cursor = first.Add(-time.Nanosecond)
	}
	for k := demoSlot(*cursor); k <= demoSlot(last); k++ {
		s := f.slot(k)
		ts := times(s)
		i := sort.Search(len(ts), func(i int) bool { return ts[i].After(*cursor) })
		for ; i < len(ts) && !ts[i].After(last); i++ {
			add(s, i)
			if !s.logged && f.log != nil {
				s.logged = true
				f.log.Info("demo incident staged", "cause", string(s.Cause), "zone", "assembly", "location", s.Location,
					"onset", s.Onset, "alarm_near", s.Alarm)
			}
		}
	}
	if last.After(*cursor) {
		*cursor = last
	}
}

func earliest(a, b time.Time) time.Time {
	if a.IsZero() || b.Before(a) {
		return b
	}
	return a
}

func latest(a, b time.Time) time.Time {
	if b.After(a) {
		return b
	}
	return a
}

// pour turns the incident's series into samples of the demo's counters
// and DP sensors.
func (f *incidentFeed) pour(s *staged, in *investigate.Input) {
	type key struct {
		loc  string
		size float64
	}
	conc := map[key][]investigate.Point{}
	for _, l := range in.Locations {
		conc[key{l.Location, l.SizeUM}] = l.Points
	}
	for _, n := range in.Neighbours {
		conc[key{n.Location, n.SizeUM}] = n.Points
	}
	flows := map[string]investigate.InstrumentSeries{}
	for _, i := range in.Instruments {
		flows[i.Location] = i
	}
	for _, c := range []struct{ counter, loc string }{{"pc-asm-1", "asm-1"}, {"pc-asm-2", "asm-2"}, {"pc-asm-3", "asm-3"}, {"pc-gown", "gown-1"}, {"pc-met", "met-1"}} {
		if !f.counters[c.counter] {
			continue
		}
		p05, p5 := conc[key{c.loc, 0.5}], conc[key{c.loc, 5}]
		inst, hasInst := flows[c.loc]
		for i, p := range p05 {
			flow, status := f.nominal[c.counter], collector.StatusOK
			if hasInst && i < len(inst.Flow) {
				flow, status = inst.Flow[i].Value, inst.Status[i].Status
			}
			vol := math.Round(flow*1000) / 1000 // a minute's sample at that flow
			n05 := p.Value * demoConcScale * vol / 1000
			n5 := n05 * demoRatio["5"]
			if i < len(p5) {
				n5 = p5[i].Value * demoConcScale5 * vol / 1000
			}
			counts := countsFrom(n05, n5)
			v := vol
			s.readings = append(s.readings, collector.RawReading{Counter: c.counter, Time: p.Time.UTC().Format(time.RFC3339Nano), VolumeL: &v,
				Counts: counts, FlowLPM: flow, SampleS: 60, Status: status})
			s.times = append(s.times, p.Time)
		}
	}
	for _, ps := range in.Pressure {
		level, ok := f.sensors[ps.Sensor]
		if !ok || len(ps.Points) == 0 {
			continue
		}
		// Scaled to the simulator's level of the sensor, so the window
		// joins its surroundings.
		var head []float64
		for _, p := range ps.Points[:min(10, len(ps.Points))] {
			head = append(head, p.Value)
		}
		slices.Sort(head)
		scale := level / head[len(head)/2]
		for _, p := range ps.Points {
			pa := math.Round(p.Value*scale*10) / 10
			s.pressure = append(s.pressure, collector.RawPressure{Sensor: ps.Sensor, Time: p.Time.UTC().Format(time.RFC3339Nano), Pa: &pa})
			s.ptimes = append(s.ptimes, p.Time)
		}
	}
	order := func(ts []time.Time) []int {
		idx := make([]int, len(ts))
		for i := range idx {
			idx[i] = i
		}
		sort.SliceStable(idx, func(a, b int) bool { return ts[idx[a]].Before(ts[idx[b]]) })
		return idx
	}
	ri := order(s.times)
	rs, rt := make([]collector.RawReading, len(ri)), make([]time.Time, len(ri))
	for j, i := range ri {
		rs[j], rt[j] = s.readings[i], s.times[i]
	}
	s.readings, s.times = rs, rt
	pi := order(s.ptimes)
	pp, pt := make([]collector.RawPressure, len(pi)), make([]time.Time, len(pi))
	for j, i := range pi {
		pp[j], pt[j] = s.pressure[i], s.ptimes[i]
	}
	s.pressure, s.ptimes = pp, pt
}

// countsFrom makes cumulative counts of the four demo channels from the
// expected counts at 0.5 and 5 µm, never rising with size.
func countsFrom(n05, n5 float64) map[string]collector.Count {
	c05 := uint64(math.Round(n05))
	c1 := max(uint64(math.Round(n05*demoRatio["1"])), uint64(math.Round(n5)))
	c1 = min(c1, c05)
	c5 := min(uint64(math.Round(n5)), c1)
	c03 := max(uint64(math.Round(n05*demoRatio["0.3"])), c05)
	return map[string]collector.Count{"0.3": {N: c03}, "0.5": {N: c05}, "1": {N: c1}, "5": {N: c5}}
}

// demoRuns records a run per shift (06:00, 14:00, 22:00) on the demo's
// production zones over the backfilled day, the current one open.
func demoRuns(ctx context.Context, st *store.Store, now time.Time) error {
	var runs []store.Run
	day := now.UTC().Truncate(24 * time.Hour).Add(-24 * time.Hour)
	n := 0
	for t := day.Add(6 * time.Hour); t.Before(now); t = t.Add(8 * time.Hour) {
		if t.Before(now.Add(-demoBackfill)) {
			continue
		}
		end := t.Add(8 * time.Hour)
		for _, z := range []struct{ zone, product string }{{"assembly", "laser head LH-7"}, {"coating-hood", "mirror coat MC-2"}} {
			n++
			r := store.Run{ID: "demo-" + z.zone + "-" + t.Format("20060102-1504"), Zone: z.zone, Start: t, Product: z.product,
				Lot: t.Format("060102") + "-" + string(rune('A'+t.Hour()/8))}
			if end.Before(now) {
				r.End = end
			}
			runs = append(runs, r)
		}
	}
	err := st.CreateRuns(ctx, runs, "demo")
	if errors.Is(err, store.ErrRunExists) {
		return nil // a demo on a kept data directory recorded them before
	}
	return err
}

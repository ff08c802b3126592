package collector

import (
	"context"
	"fmt"
	"hash/fnv"
	"iter"
	"math"
	"math/rand/v2"
	"sort"
	"time"

	"cleanmon/classify"
)

// Defaults of SimOptions: the documented rates the simulator's tests check.
const (
	// DefaultExcursionRate is the chance, per counter sample, that an
	// excursion starts: about 4 a day for a counter sampling every minute.
	DefaultExcursionRate = 1.0 / 360
	// DefaultDropoutRate is the chance, per counter sample, that the
	// counter falls silent for 3–8 samples: about 1.4 times a day at one
	// sample a minute.
	DefaultDropoutRate = 1.0 / 1000
	// DefaultDoorGapMin and DefaultDoorGapMax bound the time between the
	// starts of two door openings at a DP sensor (uniform): every 4 minutes
	// on average.
	DefaultDoorGapMin = 2 * time.Minute
	DefaultDoorGapMax = 6 * time.Minute
)

// Shape of the simulated signals.
const (
	simSizeSlope  = 2.08 // ISO 14644-1 class formula exponent: C ∝ (0.1/D)^2.08
	simLogSigma   = 0.4  // spread of the log-normal background (stationary σ of ln C)
	simLogPhi     = 0.95 // sample-to-sample correlation of the background
	simFracMin    = 0.05 // background median as a share of the limit, lowest …
	simFracMax    = 0.20 // … and highest
	simDPOffset   = 7.0  // nominal DP above the sensor's minimum, Pa
	simDPSigma    = 0.3  // DP noise, Pa
	simDPPhi      = 0.9  // DP sample-to-sample correlation
	simFlowSigma  = 0.01 // relative flow noise; kept well inside ±5 %
	simExcDecay   = 0.6  // excursion strength kept from one sample to the next
	simDropMin    = 3    // shortest dropout, samples
	simDropMax    = 8    // longest dropout, samples
	simDipMinFrac = 0.3  // door-opening dip length as a share of the sensor's delay, lowest …
	simDipMaxFrac = 0.8  // … and highest, so every dip recovers within the delay
)

// SimOptions tunes the simulator; zero fields take the defaults.
type SimOptions struct {
	Seed          uint64  // same seed, same registry, same start: same output
	ExcursionRate float64 // chance per counter sample that an excursion starts; 0 = default, < 0 = none
	DropoutRate   float64 // chance per counter sample that a dropout starts; 0 = default, < 0 = none
	// DoorGapMin and DoorGapMax bound the time between door openings at
	// each DP sensor; 0 = defaults; DoorGapMin < 0 = no door openings.
	DoorGapMin, DoorGapMax time.Duration
	Now                    func() time.Time // where Run starts when nothing was generated yet; default time.Now
	// EnvExcursionRate is the chance per environment sample that an
	// excursion out of the band starts; 0 = default, < 0 = none.
	EnvExcursionRate float64
	// Environment receives the environment samples in Run; required when
	// the registry has environment sensors.
	Environment EnvironmentSubmitter
}

// Batch is the simulated data of the half-open time window [From, To),
// each slice ordered by time (ties by instrument id).
type Batch struct {
	From, To    time.Time
	Readings    []RawReading
	Pressure    []RawPressure
	Environment []RawEnvironment
}

// Submitter is what the simulator feeds; *Ingest satisfies it.
type Submitter interface {
	SubmitReadings(ctx context.Context, raws []RawReading) (Result, error)
	SubmitPressure(ctx context.Context, raws []RawPressure) (Result, error)
}

// Simulator produces plausible readings for the counters and DP sensors of
// a registry, for the demo and for tests.
//
// Each counter gets a log-normal background whose median is a fixed share
// (5–20 %, drawn per counter) of its limit at its smallest limited channel,
// with sample-to-sample correlation; the size distribution falls as
// (0.1/D)^2.08 with a small per-counter slope variation, and counts are
// Poisson-distributed around the concentration × sampled volume. An
// excursion starts with probability ExcursionRate per sample, lifts the
// smallest limited channel to 1.5–6× its limit, and lasts 1–3 samples,
// fading. A dropout starts with probability DropoutRate per sample and
// silences the counter for 3–8 samples. Counters sample on the grid of
// their Interval, sampling continuously at their nominal flow (±1 % noise).
//
// Each DP sensor reads min_pa + 7 Pa (or mid-range when max_pa is closer)
// with 0.3 Pa noise. A door opens every DoorGapMin–DoorGapMax (uniform);
// the DP then drops to 20–80 % of min_pa for 30–80 % of the sensor's delay
// (at least one sample), so every dip recovers before a pressure-low alarm
// could be due. Sensors
// with min_pa 0 get no dips (a dip would be a flow reversal).
//
// The output depends only on the seed, the registry, the limits and the
// start time: each instrument has its own random stream, and windows of any
// length cut the same sequence. A Simulator is not safe for concurrent use.
type Simulator struct {
	opt      SimOptions
	counters []*simCounter
	sensors  []*simSensor
	env      []*simEnv
	started  bool
	cursor   time.Time
}

type simCounter struct {
	info     *CounterInfo
	rng      *rand.Rand
	refSize  float64 // smallest size with a limit
	refLimit float64 // particles/m³
	frac     float64 // background median / refLimit
	slope    float64 // size-distribution exponent
	dev      float64 // ln of the background's current deviation from its median
	next     time.Time
	exLeft   int     // further samples of the running excursion
	exMult   float64 // its current multiplier
	dropLeft int     // further silent samples
}

type simSensor struct {
	info      *SensorInfo
	rng       *rand.Rand
	nominal   float64
	dev       float64
	next      time.Time
	doors     bool
	untilDoor int // samples until the next door opening
	dipLeft   int // further samples of the running dip
	dipPa     float64
}

// NewSimulator prepares a simulation of every counter and sensor in reg.
// limits gives, per counter id, the limit in particles/m³ at each size in
// µm (the zone's class or grade limits); every counter needs at least one.
func NewSimulator(reg *Registry, limits map[string]map[float64]float64, opt SimOptions) (*Simulator, error) {
	if opt.ExcursionRate == 0 {
		opt.ExcursionRate = DefaultExcursionRate
	}
	if opt.DropoutRate == 0 {
		opt.DropoutRate = DefaultDropoutRate
	}
	if opt.DoorGapMin == 0 {
		opt.DoorGapMin = DefaultDoorGapMin
	}
	if opt.DoorGapMax == 0 {
		opt.DoorGapMax = max(DefaultDoorGapMax, opt.DoorGapMin)
	}
	if opt.DoorGapMin > 0 && opt.DoorGapMax < opt.DoorGapMin {
		return nil, fmt.Errorf("%w: DoorGapMax %s is below DoorGapMin %s", ErrSimulator, opt.DoorGapMax, opt.DoorGapMin)
	}
	if opt.EnvExcursionRate == 0 {
		opt.EnvExcursionRate = DefaultEnvExcursionRate
	}
	if opt.ExcursionRate > 1 || opt.DropoutRate > 1 || opt.EnvExcursionRate > 1 {
		return nil, fmt.Errorf("%w: rates are probabilities per sample, at most 1", ErrSimulator)
	}
	if opt.Now == nil {
		opt.Now = time.Now
	}
	s := &Simulator{opt: opt}
	for _, ci := range reg.Counters() {
		c, err := newSimCounter(ci, limits[ci.ID], opt.Seed)
		if err != nil {
			return nil, err
		}
		s.counters = append(s.counters, c)
	}
	for _, si := range reg.Sensors() {
		s.sensors = append(s.sensors, newSimSensor(si, opt))
	}
	for _, ei := range reg.EnvironmentSensors() {
		s.env = append(s.env, newSimEnv(ei, opt.Seed))
	}
	return s, nil
}

// stream gives each instrument its own random sequence, so that adding one
// does not change the others.
func stream(seed uint64, kind, id string) *rand.Rand {
	h := fnv.New64a()
	h.Write([]byte(kind))
	h.Write([]byte{0})
	h.Write([]byte(id))
	return rand.New(rand.NewPCG(seed, h.Sum64()))
}

func newSimCounter(ci *CounterInfo, lim map[float64]float64, seed uint64) (*simCounter, error) {
	if len(lim) == 0 {
		return nil, fmt.Errorf("%w: no limits for counter %s", ErrSimulator, ci.ID)
	}
	c := &simCounter{info: ci, rng: stream(seed, "counter", ci.ID)}
	// Smallest of the counter's channels with a limit; failing that, the
	// smallest limited size, extrapolated to the channels.
	byKey := make(map[string]float64, len(lim))
	smallest := math.Inf(1)
	for size, l := range lim {
		if !finite(l) || l <= 0 || !finite(size) || size < classify.MinSizeUM || size > classify.MaxSizeUM {
			return nil, fmt.Errorf("%w: counter %s: limit %g at %g µm is not usable", ErrSimulator, ci.ID, l, size)
		}
		byKey[classify.FormatSize(math.Round(size*100)/100)] = l
		if size < smallest {
			smallest, c.refSize, c.refLimit = size, size, l
		}
	}
	for i, k := range ci.Keys {
		if l, ok := byKey[k]; ok {
			c.refSize, c.refLimit = ci.SizesUM[i], l
			break
		}
	}
	c.frac = simFracMin + (simFracMax-simFracMin)*c.rng.Float64()
	c.slope = simSizeSlope + 0.3*(c.rng.Float64()-0.5)
	c.dev = simLogSigma * c.rng.NormFloat64()
	return c, nil
}

func newSimSensor(si *SensorInfo, opt SimOptions) *simSensor {
	s := &simSensor{info: si, rng: stream(opt.Seed, "sensor", si.ID)}
	s.nominal = si.MinPa + simDPOffset
	if si.MaxPa > 0 && s.nominal > si.MaxPa-1 {
		s.nominal = (si.MinPa + si.MaxPa) / 2
	}
	s.dev = simDPSigma * s.rng.NormFloat64()
	s.doors = opt.DoorGapMin > 0 && si.MinPa > 0
	if s.doors {
		s.untilDoor = 1 + s.rng.IntN(s.doorGap(opt))
	}
	return s
}

// doorGap draws the number of samples until the next door opening.
func (s *simSensor) doorGap(opt SimOptions) int {
	g := opt.DoorGapMin + time.Duration(s.rng.Float64()*float64(opt.DoorGapMax-opt.DoorGapMin))
	return max(1, int(math.Round(float64(g)/float64(s.info.Interval))))
}

// Cursor returns the simulated instant up to which data has been produced
// (zero before the first Backfill or Run).
func (s *Simulator) Cursor() time.Time { return s.cursor }

// start positions the simulation at t: the first time, every instrument's
// first sample is the first point of its interval grid at or after t;
// later, time only moves forward, and data between the cursor and t is
// generated and dropped so that the sequence stays the same.
func (s *Simulator) start(t time.Time) {
	t = t.UTC()
	if !s.started {
		s.started, s.cursor = true, t
		for _, c := range s.counters {
			c.next = gridAfter(t, time.Duration(c.info.Interval))
		}
		for _, p := range s.sensors {
			p.next = gridAfter(t, time.Duration(p.info.Interval))
		}
		for _, e := range s.env {
			e.next = gridAfter(t, time.Duration(e.info.Interval))
		}
		return
	}
	if t.After(s.cursor) {
		s.advance(t)
	}
}

func gridAfter(t time.Time, d time.Duration) time.Time {
	g := t.Truncate(d)
	if g.Before(t) {
		g = g.Add(d)
	}
	return g
}

// Backfill yields the data of [from, to) in batches of window simulated
// time (default 1 h), in time order. On a fresh simulator it starts at
// from; otherwise it continues from the cursor (time only moves forward,
// and a from ahead of the cursor skips ahead).
func (s *Simulator) Backfill(from, to time.Time, window time.Duration) iter.Seq[Batch] {
	if window <= 0 {
		window = time.Hour
	}
	return func(yield func(Batch) bool) {
		s.start(from)
		for s.cursor.Before(to) {
			end := s.cursor.Add(window)
			if end.After(to) {
				end = to.UTC()
			}
			if !yield(s.advance(end)) {
				return
			}
		}
	}
}

// Run feeds submit in (simulated) real time until ctx ends, then returns
// nil. Simulated time starts at the cursor (or at SimOptions.Now on a fresh
// simulator) and runs speed times as fast as the wall clock, so each sample
// is submitted once its simulated time has passed. With speed > 1 the
// timestamps run ahead of the clock: the ingest refuses them once they are
// more than its MaxFuture ahead, so start the simulator in the past for
// that. A failed submit ends Run with an error wrapping ErrSimulator.
func (s *Simulator) Run(ctx context.Context, speed float64, submit Submitter) error {
	if !(speed > 0) || math.IsInf(speed, 0) {
		return fmt.Errorf("%w: speed %g must be a positive factor", ErrSimulator, speed)
	}
	if len(s.env) > 0 && s.opt.Environment == nil {
		return fmt.Errorf("%w: the registry has environment sensors, but SimOptions.Environment is not set", ErrSimulator)
	}
	if !s.started {
		s.start(s.opt.Now())
	}
	simStart, wallStart := s.cursor, time.Now()
	shortest := time.Hour
	for _, c := range s.counters {
		shortest = min(shortest, time.Duration(c.info.Interval))
	}
	for _, p := range s.sensors {
		shortest = min(shortest, time.Duration(p.info.Interval))
	}
	for _, e := range s.env {
		shortest = min(shortest, time.Duration(e.info.Interval))
	}
	tick := min(max(time.Duration(float64(shortest)/speed), 10*time.Millisecond), time.Second)
	t := time.NewTicker(tick)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return nil
		case <-t.C:
		}
		target := simStart.Add(time.Duration(float64(time.Since(wallStart)) * speed))
		b := s.advance(target)
		if err := s.submit(ctx, b, submit); err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return err
		}
	}
}

func (s *Simulator) submit(ctx context.Context, b Batch, to Submitter) error {
	if len(b.Readings) > 0 {
		if _, err := to.SubmitReadings(ctx, b.Readings); err != nil {
			return fmt.Errorf("%w: readings of %s–%s: %w", ErrSimulator, b.From.Format(time.RFC3339), b.To.Format(time.RFC3339), err)
		}
	}
	if len(b.Pressure) > 0 {
		if _, err := to.SubmitPressure(ctx, b.Pressure); err != nil {
			return fmt.Errorf("%w: pressure of %s–%s: %w", ErrSimulator, b.From.Format(time.RFC3339), b.To.Format(time.RFC3339), err)
		}
	}
	if len(b.Environment) > 0 {
		if _, err := s.opt.Environment.SubmitEnvironment(ctx, b.Environment); err != nil {
			return fmt.Errorf("%w: environment of %s–%s: %w", ErrSimulator, b.From.Format(time.RFC3339), b.To.Format(time.RFC3339), err)
		}
	}
	return nil
}

// advance produces every sample in [cursor, to) and moves the cursor.
func (s *Simulator) advance(to time.Time) Batch {
	b := Batch{From: s.cursor, To: to}
	if !to.After(s.cursor) {
		b.To = s.cursor
		return b
	}
	type stamped[T any] struct {
		t time.Time
		v T
	}
	var rs []stamped[RawReading]
	for _, c := range s.counters {
		for d := time.Duration(c.info.Interval); c.next.Before(to); c.next = c.next.Add(d) {
			if raw, ok := c.sample(c.next, s.opt); ok {
				rs = append(rs, stamped[RawReading]{c.next, raw})
			}
		}
	}
	var ps []stamped[RawPressure]
	for _, p := range s.sensors {
		for d := time.Duration(p.info.Interval); p.next.Before(to); p.next = p.next.Add(d) {
			ps = append(ps, stamped[RawPressure]{p.next, p.sample(p.next, s.opt)})
		}
	}
	var es []stamped[RawEnvironment]
	for _, e := range s.env {
		for d := time.Duration(e.info.Interval); e.next.Before(to); e.next = e.next.Add(d) {
			es = append(es, stamped[RawEnvironment]{e.next, e.sample(e.next, s.opt.EnvExcursionRate)})
		}
	}
	sort.SliceStable(es, func(i, j int) bool { return es[i].t.Before(es[j].t) })
	b.Environment = make([]RawEnvironment, len(es))
	for i := range es {
		b.Environment[i] = es[i].v
	}
	// Instruments were visited in id order, so a stable sort by time
	// leaves ties in id order.
	sort.SliceStable(rs, func(i, j int) bool { return rs[i].t.Before(rs[j].t) })
	sort.SliceStable(ps, func(i, j int) bool { return ps[i].t.Before(ps[j].t) })
	b.Readings = make([]RawReading, len(rs))
	for i := range rs {
		b.Readings[i] = rs[i].v
	}
	b.Pressure = make([]RawPressure, len(ps))
	for i := range ps {
		b.Pressure[i] = ps[i].v
	}
	s.cursor = to
	return b
}

// sample draws the counter's reading at t; false while it is silent.
func (c *simCounter) sample(t time.Time, opt SimOptions) (RawReading, bool) {
	r := c.rng
	c.dev = simLogPhi*c.dev + simLogSigma*math.Sqrt(1-simLogPhi*simLogPhi)*r.NormFloat64()
	// The excursion and dropout processes run whether or not the counter
	// is heard, so a dropout does not shift what follows it.
	mult := 1.0
	if c.exLeft > 0 {
		c.exLeft--
		c.exMult *= simExcDecay
		mult = max(1, c.exMult)
	} else if r.Float64() < opt.ExcursionRate {
		k := 1.5 + 4.5*r.Float64()
		c.exLeft = r.IntN(3)
		c.exMult = k / (c.frac * math.Exp(c.dev))
		mult = max(1, c.exMult)
	}
	silent := false
	if c.dropLeft > 0 {
		c.dropLeft--
		silent = true
	} else if r.Float64() < opt.DropoutRate {
		c.dropLeft = simDropMin + r.IntN(simDropMax-simDropMin+1) - 1
		silent = true
	}
	ci := c.info
	// Flow and volume are rounded as an instrument would report them, the
	// volume computed from the reported flow so that the two agree.
	flow := round(ci.FlowLPM*(1+max(-3*simFlowSigma, min(3*simFlowSigma, simFlowSigma*r.NormFloat64()))), 1e3)
	secs := time.Duration(ci.Interval).Seconds()
	vol := round(flow*secs/60, 1e4)
	level := c.frac * c.refLimit * math.Exp(c.dev) * mult
	n := len(ci.SizesUM)
	conc := make([]float64, n+1) // cumulative expected concentration; conc[n] = 0
	for i, d := range ci.SizesUM {
		conc[i] = level * math.Pow(c.refSize/d, c.slope)
	}
	diff := make([]uint64, n)
	for i := range n {
		diff[i] = poisson(r, (conc[i]-conc[i+1])*vol/1000)
	}
	if silent {
		return RawReading{}, false
	}
	counts := diff
	if ci.Mode == ModeCumulative {
		counts = classify.CumulativeFromDifferential(diff)
	}
	raw := RawReading{
		Counter: ci.ID,
		Time:    t.Format(time.RFC3339Nano),
		VolumeL: &vol,
		Counts:  make(map[string]Count, n),
		FlowLPM: flow,
		SampleS: secs,
		Status:  StatusOK,
	}
	for i, k := range ci.Keys {
		raw.Counts[k] = Count{N: counts[i]}
	}
	return raw, true
}

// sample draws the sensor's DP at t.
func (p *simSensor) sample(t time.Time, opt SimOptions) RawPressure {
	r := p.rng
	p.dev = simDPPhi*p.dev + simDPSigma*math.Sqrt(1-simDPPhi*simDPPhi)*r.NormFloat64()
	pa := p.nominal + p.dev
	if p.doors {
		p.untilDoor--
		switch {
		case p.dipLeft > 0:
			p.dipLeft--
			pa = p.dipPa
			if p.untilDoor <= 0 { // door again while still open: keep the schedule
				p.untilDoor = p.doorGap(opt)
			}
		case p.untilDoor <= 0:
			p.dipPa = p.info.MinPa * (0.2 + 0.6*r.Float64())
			span := (simDipMinFrac + (simDipMaxFrac-simDipMinFrac)*r.Float64()) * float64(p.info.Delay)
			p.dipLeft = max(1, int(span/float64(p.info.Interval))) - 1
			p.untilDoor = p.doorGap(opt)
			pa = p.dipPa
		}
	}
	pa = round(pa, 100)
	return RawPressure{Sensor: p.info.ID, Time: t.Format(time.RFC3339Nano), Pa: &pa}
}

func round(v, scale float64) float64 { return math.Round(v*scale) / scale }

// poisson draws a Poisson count with mean lambda: exact (Knuth) for small
// means, the normal approximation above 30, where it is close enough for
// a demo.
func poisson(r *rand.Rand, lambda float64) uint64 {
	if !(lambda > 0) {
		return 0
	}
	if lambda < 30 {
		limit, p, k := math.Exp(-lambda), r.Float64(), uint64(0)
		for p > limit {
			p *= r.Float64()
			k++
		}
		return k
	}
	v := math.Round(lambda + math.Sqrt(lambda)*r.NormFloat64())
	if v < 0 {
		return 0
	}
	return uint64(v)
}

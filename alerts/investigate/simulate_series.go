package investigate

import (
	"math"
	"time"
)

// series samples every shape with noise: log-normal scatter on
// concentrations, normal on DP, flow, airflow, temperature and humidity.
func (s *sim) series(alarm time.Time, at string) Input {
	in := Input{Zone: "assembly", AlarmTime: alarm, AlarmLocation: at, SizeUM: 0.5, From: s.from, To: s.to}
	conc := func(bg float64, extra func(time.Time) float64) []Point {
		var pts []Point
		for t := s.from; !t.After(s.to); t = t.Add(simReadPeriod) {
			x := 0.0
			if extra != nil {
				x = extra(t)
			}
			pts = append(pts, Point{t, bg * (1 + x) * math.Exp(0.3*s.rng.NormFloat64())})
		}
		return pts
	}
	for _, loc := range simLocations {
		in.Locations = append(in.Locations,
			LocationSeries{Location: loc, SizeUM: 0.5, Points: conc(5000, s.zone[loc])},
			LocationSeries{Location: loc, SizeUM: 5, Points: conc(300, s.zone[loc])})
	}
	in.Neighbours = []NeighbourSeries{
		{Zone: "gowning", Location: "gown-1", SizeUM: 0.5, Lower: true, Points: conc(30000, s.neighbour["gowning"])},
		{Zone: "metrology", Location: "met-1", SizeUM: 0.5, Points: conc(2000, s.neighbour["metrology"])},
	}
	normal := func(period time.Duration, sd float64, v func(time.Time) float64) []Point {
		var pts []Point
		for t := s.from; !t.After(s.to); t = t.Add(period) {
			pts = append(pts, Point{t, v(t) + sd*s.rng.NormFloat64()})
		}
		return pts
	}
	for _, d := range simDP {
		f, nominal := s.dp[d.sensor], d.nominal
		if f == nil {
			f = func(time.Time) float64 { return nominal }
		}
		in.Pressure = append(in.Pressure, PressureSeries{Sensor: d.sensor, High: d.high, Low: d.low, MinPa: d.min, Points: normal(simDPPeriod, 0.3, f)})
	}
	air := s.airflow
	if air == nil {
		air = func(time.Time) float64 { return 0.45 }
	}
	in.Environment = []EnvironmentSeries{
		{Sensor: "av-hood", Quantity: QuantityVelocity, Low: 0.36, High: 0.54, Points: normal(simEnvPeriod, 0.01, air)},
		{Sensor: "th-asm", Quantity: QuantityTemperature, Low: 20, High: 22, Points: normal(simReadPeriod, 0.05, func(time.Time) float64 { return 21 })},
		{Sensor: "th-asm", Quantity: QuantityHumidity, Low: 40, High: 50, Points: normal(simReadPeriod, 0.3, func(time.Time) float64 { return 45 })},
	}
	for i, loc := range simLocations {
		flow, status := func(time.Time) float64 { return simNominalLPM }, func(time.Time) string { return "ok" }
		if loc == s.faultyAt {
			flow, status = s.flow, s.status
		}
		inst := InstrumentSeries{Counter: "pc-asm-" + string(rune('1'+i)), Location: loc, NominalLPM: simNominalLPM, Flow: normal(simReadPeriod, 0.1, flow)}
		for t := s.from; !t.After(s.to); t = t.Add(simReadPeriod) {
			inst.Status = append(inst.Status, StatusPoint{t, status(t)})
		}
		in.Instruments = append(in.Instruments, inst)
	}
	return in
}

// distractors adds, each with its own chance, a brief door passage on a
// random boundary sensor and an operating-state change, at random times.
func (s *sim) distractors(in *Input) {
	if s.rng.IntN(2) == 0 {
		p := &in.Pressure[s.rng.IntN(len(in.Pressure))]
		at := s.from.Add(10*time.Minute + s.minutes(0, 75))
		long := time.Duration(s.uniform(15, 40) * float64(time.Second))
		low := s.uniform(2, 4.5)
		for i := range p.Points {
			if t := p.Points[i].Time; !t.Before(at) && t.Before(at.Add(long)) {
				p.Points[i].Value = low + 0.3*s.rng.NormFloat64()
			}
		}
	}
	if s.rng.IntN(10) < 3 {
		at := s.from.Add(s.minutes(5, 85)).Truncate(time.Second)
		in.States = []StateChange{{Time: at, From: "at-rest", To: "in-operation", By: "shift lead"}}
	}
}

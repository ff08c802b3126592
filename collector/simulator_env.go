package collector

import (
	"math"
	"math/rand/v2"
	"time"
)

// DefaultEnvExcursionRate is the chance, per environment sample, that an
// excursion starts: about twice a day for a sensor reporting every
// minute.
const DefaultEnvExcursionRate = 1.0 / 720

// Shape of the simulated environment signals.
const (
	simEnvSigma  = 0.15 // noise as a share of the band's half-width (stationary σ)
	simEnvPhi    = 0.9  // sample-to-sample correlation
	simEnvExcMin = 3    // shortest excursion, samples
	simEnvExcMax = 12   // longest: beyond the default 5-minute delay at one sample a minute
	simEnvExcOut = 1.25 // excursion peak, in half-widths of the outer band from the centre
)

// Where a channel without any band is simulated: a comfortable cleanroom
// (common practice, no source) and a hood at the middle of the EU GMP
// Annex 1 guidance of 0.36–0.54 m/s (from memory).
var simEnvDefaults = map[string][2]float64{ // centre, half-width
	ChanTemperature: {21, 1},
	ChanHumidity:    {45, 5},
	ChanVelocity:    {0.45, 0.09},
}

// simEnv is one simulated environment sensor.
type simEnv struct {
	info  *EnvironmentSensorInfo
	rng   *rand.Rand
	chans []simEnvChan
	next  time.Time
}

type simEnvChan struct {
	name         string
	centre, half float64
	peak         float64 // excursion peak, offset from the centre
	dev          float64 // current deviation from the centre, in half-widths
	excLeft      int     // further samples of the running excursion
	excSign      float64 // +1 above the band, −1 below
	excAt        int     // samples into the excursion
	excLen       int
	decimals     float64 // rounding scale
}

// newSimEnv centres each channel on the sensor's tightest band (the alert
// band when given, else the action band), so that the simulated room
// stays inside it except in excursions.
func newSimEnv(ei *EnvironmentSensorInfo, seed uint64) *simEnv {
	e := &simEnv{info: ei, rng: stream(seed, "environment", ei.ID)}
	for _, ch := range ei.Channels() {
		c := simEnvChan{name: ch, decimals: 100}
		if ch == ChanVelocity {
			c.decimals = 1000
		}
		def := simEnvDefaults[ch]
		c.centre, c.half = def[0], def[1]
		if lim := ei.Limits(ch); lim != nil {
			b := lim.Action
			if lim.Alert != nil {
				b = lim.Alert
			}
			switch {
			case b.Low != nil && b.High != nil:
				c.centre, c.half = (*b.Low+*b.High)/2, (*b.High-*b.Low)/2
			case b.Low != nil:
				c.centre = *b.Low + c.half
			case b.High != nil:
				c.centre = *b.High - c.half
			}
		}
		c.peak = simEnvExcOut * c.half
		if lim := ei.Limits(ch); lim != nil && lim.Action != nil && lim.Action.Low != nil && lim.Action.High != nil {
			c.peak = simEnvExcOut * (*lim.Action.High - *lim.Action.Low) / 2
		}
		c.dev = simEnvSigma * e.rng.NormFloat64()
		e.chans = append(e.chans, c)
	}
	return e
}

// sample draws the sensor's values at t.
func (e *simEnv) sample(t time.Time, rate float64) RawEnvironment {
	raw := RawEnvironment{Sensor: e.info.ID, Time: t.Format(time.RFC3339Nano)}
	r := e.rng
	for i := range e.chans {
		c := &e.chans[i]
		c.dev = simEnvPhi*c.dev + simEnvSigma*math.Sqrt(1-simEnvPhi*simEnvPhi)*r.NormFloat64()
		dev := c.dev
		if c.excLeft == 0 && r.Float64() < rate {
			c.excLen = simEnvExcMin + r.IntN(simEnvExcMax-simEnvExcMin+1)
			c.excLeft, c.excAt = c.excLen, 0
			c.excSign = 1
			if r.IntN(2) == 0 {
				c.excSign = -1
			}
		}
		if c.excLeft > 0 {
			// A rise to the peak and back: a door held open, a heater
			// or a fan that falters and recovers.
			c.excAt++
			c.excLeft--
			dev += c.excSign * c.peak / c.half * math.Sin(math.Pi*float64(c.excAt)/float64(c.excLen+1))
		}
		v := math.Round((c.centre+dev*c.half)*c.decimals) / c.decimals
		switch c.name {
		case ChanTemperature:
			raw.TemperatureC = &v
		case ChanHumidity:
			v = min(max(v, 0), 100)
			raw.HumidityPct = &v
		case ChanVelocity:
			v = max(v, 0)
			raw.VelocityMS = &v
		}
	}
	return raw
}

package alerts

import (
	"context"
	"fmt"
	"time"
)

// ObserveDevice judges what a poller learns of an instrument beyond its
// readings: that it cannot be reached, answers with protocol errors, was
// restarted, or reports values that cannot be real (fault set, with the
// poller's reason), or that it answers properly again (fault false). It is
// an instrument alarm of cause "device" on the counter or sensor id, at the
// level its zone gives instrument alarms. Unknown ids are ignored: the
// poller only polls configured instruments.
func (e *Engine) ObserveDevice(ctx context.Context, id string, fault bool, reason string, at time.Time) error {
	if at.IsZero() {
		return fmt.Errorf("%w: device %s: time: missing", ErrObservation, id)
	}
	e.mu.Lock()
	var zone, location, counter, sensor string
	if c, ok := e.counters[id]; ok {
		zone, location, counter = c.Zone, c.Location, c.ID
	} else if s, ok := e.sensors[id]; ok {
		zone, sensor = s.High, s.ID
	} else {
		e.mu.Unlock()
		return nil
	}
	e.touched = true
	t := e.begin()
	a := Alarm{Zone: zone, Kind: KindInstrument, Location: location, Counter: counter, Sensor: sensor}
	if fault {
		a.Message = fmt.Sprintf("%s: %s; nothing it reports is stored until it answers properly", id, reason)
	} else {
		a.Message = fmt.Sprintf("%s answers properly again", id)
	}
	t.judge(condition{key: zone + ":" + id + ":" + KindInstrument + ":device", present: fault,
		level: e.instrumentLevel(zone), tmpl: a, since: at, at: at})
	return e.finish(ctx, t)
}

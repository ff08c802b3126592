package investigate

import (
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"
)

func TestDoorOpenings(t *testing.T) {
	t0 := alarmAt
	pts := func(vals ...float64) []Point {
		out := make([]Point, len(vals))
		for i, v := range vals {
			out[i] = Point{t0.Add(time.Duration(i) * 10 * time.Second), v}
		}
		return out
	}
	at := func(i int) time.Time { return t0.Add(time.Duration(i) * 10 * time.Second) }
	tests := []struct {
		name string
		vals []float64
		want []DoorOpening
	}{
		{"none", []float64{12, 11, 12}, nil},
		{"one closed", []float64{12, 3, 2, 9, 12}, []DoorOpening{{Start: at(1), End: at(3), LowPa: 2}}},
		{"hovering at the minimum counts once", []float64{12, 7.9, 8.2, 7.8, 8.6}, []DoorOpening{{Start: at(1), End: at(4), LowPa: 7.8}}},
		{"still open at the end", []float64{12, 4, 3}, []DoorOpening{{Start: at(1), LowPa: 3}}},
		{"two", []float64{3, 12, 12, 1, 12}, []DoorOpening{{Start: at(0), End: at(1), LowPa: 3}, {Start: at(3), End: at(4), LowPa: 1}}},
		{"exactly at the minimum is not open", []float64{8, 8, 8}, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := DoorOpenings("dp-asm", 8, 0.5, pts(tc.vals...), t0, t0.Add(time.Hour))
			if len(got) != len(tc.want) {
				t.Fatalf("got %d openings %+v, want %d", len(got), got, len(tc.want))
			}
			for i := range got {
				w := tc.want[i]
				w.Sensor = "dp-asm"
				if got[i] != w {
					t.Errorf("opening %d = %+v, want %+v", i, got[i], w)
				}
			}
		})
	}
}

func TestWeight(t *testing.T) {
	o := Options{}.withDefaults()
	rise := alarmAt
	m := func(x float64) time.Time { return rise.Add(time.Duration(x * float64(time.Minute))) }
	tests := []struct {
		name       string
		start, end time.Time
		want       float64
	}{
		{"under way at the rise", m(-3), time.Time{}, 1},
		{"ended at the rise", m(-3), m(0), 1},
		{"began within the simultaneous span after", m(0.5), time.Time{}, 1},
		{"ended 6 min before the rise", m(-10), m(-6), math.Exp(-1)},
		{"began 20 min before", m(-20), time.Time{}, math.Exp(-1)},
		{"began 6 min after", m(6), time.Time{}, 0.5 * math.Exp(-1)},
	}
	for _, tc := range tests {
		if got := o.weight(rise, tc.start, tc.end); math.Abs(got-tc.want) > 1e-12 {
			t.Errorf("%s: weight %v, want %v", tc.name, got, tc.want)
		}
	}
}

func TestMedianAndBaseline(t *testing.T) {
	if got := median([]float64{3, 1, 2}); got != 2 {
		t.Errorf("median odd = %v", got)
	}
	if got := median([]float64{4, 1, 3, 2}); got != 2.5 {
		t.Errorf("median even = %v", got)
	}
	// MAD of 1..9 is 2; scaled by 1.4826 (common practice, no source).
	var pts []Point
	for i := 1; i <= 9; i++ {
		pts = append(pts, Point{alarmAt.Add(time.Duration(i) * time.Second), float64(i)})
	}
	b, ok := robustBaseline(pts, alarmAt, alarmAt.Add(time.Minute), 0, identity)
	if !ok || b.median != 5 || math.Abs(b.scale-2*1.4826) > 1e-12 {
		t.Errorf("baseline = %+v, %v; want median 5, scale %v", b, ok, 2*1.4826)
	}
	if _, ok := robustBaseline(pts[:4], alarmAt, alarmAt.Add(time.Minute), 0, identity); ok {
		t.Error("a baseline from 4 samples was accepted")
	}
}

func TestInputErrors(t *testing.T) {
	good := func() Input {
		return SimulateIncident(rand.New(rand.NewPCG(1, 1)), CauseDoorHeldOpen, alarmAt).Input
	}
	tests := []struct {
		name  string
		edit  func(*Input)
		field string
	}{
		{"no alarm time", func(in *Input) { in.AlarmTime = time.Time{} }, "AlarmTime"},
		{"alarm outside the window", func(in *Input) { in.AlarmTime = in.To.Add(time.Minute) }, "From/To"},
		{"NaN pressure", func(in *Input) { in.Pressure[1].Points[7].Value = math.NaN() }, "Pressure[1].Points[7].Value"},
		{"time going back", func(in *Input) { in.Locations[2].Points[3].Time = in.From.Add(-time.Hour) }, "Locations[2].Points[3].Time"},
		{"status out of order", func(in *Input) { in.Instruments[0].Status[5].Time = in.From.Add(-time.Hour) }, "Instruments[0].Status[5].Time"},
	}
	for _, tc := range tests {
		in := good()
		tc.edit(&in)
		_, err := Investigate(in, Options{})
		if !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), tc.field) {
			t.Errorf("%s: error %v, want ErrInput naming %s", tc.name, err, tc.field)
		}
	}
}

// A zone with nothing recorded but its own rise gets no invented cause,
// and the missing series are named.
func TestNothingToBlame(t *testing.T) {
	inc := SimulateIncident(rand.New(rand.NewPCG(5, 5)), CauseNeighbour, alarmAt)
	in := inc.Input
	in.Neighbours, in.Pressure, in.Instruments, in.Environment, in.States = nil, nil, nil, nil, nil
	res, err := Investigate(in, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Events) != 0 {
		t.Errorf("events %+v from a zone with no other series", res.Events)
	}
	if !res.RiseFound {
		t.Error("the zone's own rise was not found")
	}
	if len(res.Unknown) == 0 || !strings.Contains(res.Unknown[0], "DP") {
		t.Errorf("Unknown = %q, want the missing DP named", res.Unknown)
	}
}

// The evidence names the sensor, its lowest value and the lead time.
func TestEvidenceWords(t *testing.T) {
	base := alarmAt.Add(-time.Hour)
	var dp, conc []Point
	for t := base; !t.After(alarmAt.Add(30 * time.Minute)); t = t.Add(10 * time.Second) {
		v := 12.0 + 0.1*math.Sin(float64(t.Unix()))
		if !t.Before(alarmAt.Add(-5*time.Minute)) && t.Before(alarmAt.Add(-2*time.Minute)) {
			v = 3.1
		}
		dp = append(dp, Point{t, v})
		c := 5000.0 * (1 + 0.05*math.Sin(float64(t.Unix())))
		if !t.Before(alarmAt.Add(-4*time.Minute - 20*time.Second)) {
			c = 200000
		}
		conc = append(conc, Point{t, c})
	}
	in := Input{Zone: "assembly", AlarmTime: alarmAt, AlarmLocation: "asm-2", SizeUM: 0.5,
		From: base, To: alarmAt.Add(30 * time.Minute),
		Locations: []LocationSeries{{Location: "asm-2", SizeUM: 0.5, Points: conc}},
		Pressure:  []PressureSeries{{Sensor: "dp-asm", High: "assembly", Low: "gowning", MinPa: 8, Points: dp}}}
	res, err := Investigate(in, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Events) == 0 {
		t.Fatal("no event")
	}
	want := "dp-asm fell to 3.1 Pa (minimum 8.0 Pa) for 3 min, 40 s before the rise at asm-2"
	if e := res.Events[0]; e.Kind != KindDoor || !strings.HasPrefix(e.Evidence, want) {
		t.Errorf("first event %s %q, want door-open starting %q", e.Kind, e.Evidence, want)
	}
	if n := len(res.Doors[0].Openings); n != 1 {
		t.Errorf("%d door openings, want 1", n)
	}
}

// A sensor that fell silent, and a counter that faulted before the
// search span, are named as unknown rather than passed over.
func TestSilenceAndEarlyFaultAreUnknown(t *testing.T) {
	in := SimulateIncident(rand.New(rand.NewPCG(9, 9)), CauseNeighbour, alarmAt).Input
	dp := in.Pressure[0].Points
	var kept []Point
	for _, p := range dp {
		if p.Time.Before(alarmAt.Add(-10*time.Minute)) || p.Time.After(alarmAt.Add(5*time.Minute)) {
			kept = append(kept, p)
		}
	}
	in.Pressure[0].Points = kept
	in.Instruments[1].Status[3].Status = "laser-fault"
	res, err := Investigate(in, Options{})
	if err != nil {
		t.Fatal(err)
	}
	got := strings.Join(res.Unknown, "\n")
	for _, want := range []string{in.Pressure[0].Sensor + ": no samples from 09:49:50 to 10:05:10", "pc-asm-2 at asm-2 reported a fault before"} {
		if !strings.Contains(got, want) {
			t.Errorf("Unknown %q lacks %q", res.Unknown, want)
		}
	}
}

package alerts

import (
	"testing"
	"time"
)

func TestOperatingAt(t *testing.T) {
	at := func(m int) time.Time { return engT0.Add(time.Duration(m) * time.Minute) }
	hist := []OperatingChange{
		{Zone: "fill", State: AtRest, Time: at(60)},       // end of shift: clean-up until 80
		{Zone: "fill", State: InOperation, Time: at(0)},   // given out of order on purpose
		{Zone: "fill", State: Maintenance, Time: at(120)}, // from at-rest
		{Zone: "fill", State: AtRest, Time: at(150)},      // back: a new clean-up until 170
		{Zone: "fill", State: InOperation, Time: at(160)}, // work resumes within it
	}
	cases := []struct {
		m       int
		op      string
		limits  string
		judged  bool
		since   int // minutes; -1: zero
		cleanUp int // minutes; -1: zero
	}{
		{-10, AtRest, AtRest, true, -1, -1}, // before any change: the configured state
		{0, InOperation, InOperation, true, 0, -1},
		{59, InOperation, InOperation, true, 0, -1},
		// EU GMP Annex 1 (2022) guidance, 15–20 min clean-up (from memory):
		// the default is 20 min, judged against the state before meanwhile.
		{60, AtRest, InOperation, true, 0, 80},
		{79, AtRest, InOperation, true, 0, 80},
		{80, AtRest, AtRest, true, 80, -1},
		{119, AtRest, AtRest, true, 80, -1},
		{120, Maintenance, AtRest, false, 80, -1},
		{150, AtRest, AtRest, true, 80, 170},
		{160, InOperation, InOperation, true, 160, -1},
		{500, InOperation, InOperation, true, 160, -1},
	}
	for _, c := range cases {
		st := OperatingAt(AtRest, hist, 0, at(c.m))
		want := StateAt{Operating: c.op, Limits: c.limits, Judged: c.judged}
		if c.since >= 0 {
			want.Since = at(c.since)
		}
		if c.cleanUp >= 0 {
			want.CleanUpUntil = at(c.cleanUp)
		}
		if st != want {
			t.Errorf("minute %d: %+v, want %+v", c.m, st, want)
		}
	}
	// A zone's own clean-up period.
	if st := OperatingAt(InOperation, hist[:1], 15*time.Minute, at(75)); st.Limits != AtRest || !st.Since.Equal(at(75)) {
		t.Errorf("15 min clean-up: %+v", st)
	}
}

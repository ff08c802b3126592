package alerts

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"time"

	"cleanmon/classify"

	"github.com/prometheus/common/model"
)

// Operating states of a zone (the documented API). Maintenance is only ever set at
// run time; a configuration names the state the zone normally runs in.
const (
	AtRest      = "at-rest"
	InOperation = "in-operation"
	Maintenance = "maintenance"
)

// Defaults for a zone that leaves window or stale_after out.
const (
	DefaultWindow     = 10 * time.Minute
	DefaultStaleAfter = 3 * time.Minute
)

// Errors of the zone configuration and the live zone state.
var (
	ErrZoneConfig     = errors.New("alerts: invalid zone configuration")
	ErrUnknownZone    = errors.New("alerts: unknown zone")
	ErrOperatingState = errors.New("alerts: invalid operating state")
)

// ZoneConfig is one zone of the site configuration (the `zones:` list).
// A zone has an ISO 14644-1 class, or an EU GMP grade, or neither (an
// unclassified reference area such as a corridor), never both.
type ZoneConfig struct {
	ID   string `yaml:"id"`
	Name string `yaml:"name"`
	// Class is the ISO class (1–9 in steps of 0.1); nil when the zone is
	// graded or unclassified.
	Class *float64 `yaml:"class"`
	// Grade is the EU GMP Annex 1 grade (A, B, C or D); empty when none.
	Grade string `yaml:"grade"`
	// Edition of ISO 14644-1 whose table the class limits come from:
	// "2015" (default) or "1999".
	Edition string `yaml:"edition"`
	// OperatingState is the state the zone normally runs in: at-rest or
	// in-operation (default in-operation; required for a graded zone,
	// whose limits depend on it).
	OperatingState string  `yaml:"operating_state"`
	AreaM2         float64 `yaml:"area_m2"`
	// Sizes are the threshold sizes in µm the zone is judged at.
	Sizes []string `yaml:"sizes"`
	// Window is the span of the rolling mean (default 10m).
	Window model.Duration `yaml:"window"`
	// StaleAfter is how long a location may go without a reading and
	// still count as fresh (default 3m).
	StaleAfter model.Duration `yaml:"stale_after"`
	// CleanUp is the clean-up period after a switch to at-rest (default
	// DefaultCleanUp): meanwhile the zone is judged against the limits of
	// the state before, and its at-rest window starts after it.
	CleanUp model.Duration `yaml:"clean_up"`
	// Levels are the monitoring levels per size (keyed like "0.5"). Left
	// out, the action level is the class limit and there is no alert level.
	Levels    map[string]Levels `yaml:"levels"`
	Locations []LocationConfig  `yaml:"locations"`
}

// Levels are the ISO 14644-2 monitoring levels of one size, particles/m³:
// alert is the early warning of drift, action calls for corrective action.
// Both sit at or below the class limit.
type Levels struct {
	Alert  *float64 `yaml:"alert"`
	Action *float64 `yaml:"action"`
}

// LocationConfig is one sampling location of a zone.
type LocationConfig struct {
	ID   string `yaml:"id"`
	Name string `yaml:"name"`
}

// FieldError is one problem of the zone configuration. Path is the
// configuration path ("zones[1].levels.0.5.alert") so that the loader can
// point at the line and column it came from.
type FieldError struct {
	Path string
	Msg  string
}

func (e FieldError) Error() string { return e.Path + ": " + e.Msg }

// SizeLimit is what a zone is judged against at one threshold size, in
// particles/m³, for one operating state.
type SizeLimit struct {
	SizeUM float64
	// Limit is the class or grade limit; nil when the standard specifies
	// none at this size and state (Note says why).
	Limit *float64
	Note  string
	// Alert is the alert level; nil when none is configured.
	Alert *float64
	// Action is the action level in force: the configured one, but never
	// above the limit; the limit itself when none is configured; nil when
	// there is neither.
	Action *float64
}

// zoneSpec is a ZoneConfig checked and parsed once.
type zoneSpec struct {
	cfg      ZoneConfig
	hasClass bool
	class    float64
	grade    string
	edition  classify.Edition
	sizes    []float64
	window   time.Duration
	stale    time.Duration
	cleanUp  time.Duration
	base     string                 // configured operating state
	limits   map[string][]SizeLimit // by at-rest / in-operation
	hasLimit bool                   // some size has a specified limit
}

// ValidateZones checks a zone list and reports every problem, each with
// its path ("zones[2].class"). An empty answer means NewZoneTracker will
// accept the list.
func ValidateZones(zs []ZoneConfig) []FieldError {
	_, errs := compileZones(zs)
	return errs
}

func compileZones(zs []ZoneConfig) ([]*zoneSpec, []FieldError) {
	var errs []FieldError
	specs := make([]*zoneSpec, 0, len(zs))
	seen := map[string]int{}
	for i, z := range zs {
		p := fmt.Sprintf("zones[%d]", i)
		if z.ID != "" {
			if j, dup := seen[z.ID]; dup {
				errs = append(errs, FieldError{p + ".id", fmt.Sprintf("zone %q already defined at zones[%d]", z.ID, j)})
			} else {
				seen[z.ID] = i
			}
		}
		s, e := compileZone(z, p)
		errs = append(errs, e...)
		specs = append(specs, s)
	}
	return specs, errs
}

func compileZone(z ZoneConfig, p string) (*zoneSpec, []FieldError) {
	var errs []FieldError
	bad := func(field, format string, a ...any) {
		errs = append(errs, FieldError{p + field, fmt.Sprintf(format, a...)})
	}
	s := &zoneSpec{cfg: z, edition: classify.Edition2015, window: DefaultWindow, stale: DefaultStaleAfter, cleanUp: DefaultCleanUp}

	if strings.TrimSpace(z.ID) == "" {
		bad(".id", "missing: every zone needs an id")
	} else if strings.ContainsAny(z.ID, "/?#% \t") {
		bad(".id", "%q: an id may not contain '/', '?', '#', '%%' or spaces (it is part of API paths)", z.ID)
	}

	if z.Class != nil && z.Grade != "" {
		bad(".grade", "a zone has an ISO class or a GMP grade, not both (class %s given too)", classify.FormatSize(*z.Class))
	}
	if z.Class != nil {
		if err := classify.ValidateClass(*z.Class); err != nil {
			bad(".class", "%v", err)
		} else {
			s.hasClass, s.class = true, *z.Class
		}
	}
	if z.Grade != "" && z.Class == nil {
		g := strings.ToUpper(strings.TrimSpace(z.Grade))
		switch g {
		case "A", "B", "C", "D":
			s.grade = g
		default:
			bad(".grade", "%q is not an EU GMP grade (A, B, C or D)", z.Grade)
		}
	}
	switch z.Edition {
	case "", "2015":
	case "1999":
		s.edition = classify.Edition1999
	default:
		bad(".edition", "%q: the ISO 14644-1 edition is 2015 or 1999", z.Edition)
	}
	if z.Edition != "" && z.Class == nil {
		bad(".edition", "only a zone with an ISO class has an edition")
	}

	switch z.OperatingState {
	case AtRest, InOperation:
		s.base = z.OperatingState
	case "":
		s.base = InOperation
		if z.Grade != "" && z.Class == nil {
			bad(".operating_state", "missing: a graded zone's limits depend on it (at-rest or in-operation)")
		}
	case Maintenance:
		bad(".operating_state", "maintenance is set at run time (PUT /api/v1/zones/{zone}/state); configure the state the zone normally runs in: at-rest or in-operation")
	default:
		bad(".operating_state", "%q: want at-rest or in-operation", z.OperatingState)
	}

	if s.hasClass && s.base == AtRest && classify.ClassNote(s.class) != "" {
		bad(".operating_state", "%s", classify.ClassNote(s.class))
	}

	classified := z.Class != nil || z.Grade != ""
	switch {
	case math.IsNaN(z.AreaM2) || z.AreaM2 < 0:
		bad(".area_m2", "%v: an area is a positive number of m²", z.AreaM2)
	case classified && z.AreaM2 == 0:
		bad(".area_m2", "missing: a classified zone needs its floor area in m² (it sets the number of sampling locations)")
	}

	if z.Window < 0 {
		bad(".window", "%s: must be positive", time.Duration(z.Window))
	} else if z.Window > 0 {
		s.window = time.Duration(z.Window)
	}
	if z.StaleAfter < 0 {
		bad(".stale_after", "%s: must be positive", time.Duration(z.StaleAfter))
	} else if z.StaleAfter > 0 {
		s.stale = time.Duration(z.StaleAfter)
	}

	if z.CleanUp < 0 {
		bad(".clean_up", "%s: must be positive", time.Duration(z.CleanUp))
	} else if z.CleanUp > 0 {
		s.cleanUp = time.Duration(z.CleanUp)
	}

	seenSize := map[float64]bool{}
	sizeIdx := map[float64]int{}
	for i, raw := range z.Sizes {
		v, err := classify.ParseSize(raw)
		if err != nil {
			bad(fmt.Sprintf(".sizes[%d]", i), "%v", err)
			continue
		}
		if seenSize[v] {
			bad(fmt.Sprintf(".sizes[%d]", i), "%s µm listed twice", classify.FormatSize(v))
			continue
		}
		seenSize[v] = true
		sizeIdx[v] = i
		s.sizes = append(s.sizes, v)
	}
	sortFloat64s(s.sizes)
	if classified && len(z.Sizes) == 0 {
		bad(".sizes", "missing: a classified zone is judged at one or more threshold sizes, e.g. [\"0.5\", \"5\"]")
	}

	seenLoc := map[string]int{}
	for i, l := range z.Locations {
		lp := fmt.Sprintf(".locations[%d].id", i)
		switch {
		case strings.TrimSpace(l.ID) == "":
			bad(lp, "missing: every location needs an id")
		case strings.ContainsAny(l.ID, "/?#% \t,"):
			bad(lp, "%q: an id may not contain '/', '?', '#', '%%', ',' or spaces", l.ID)
		default:
			if j, dup := seenLoc[l.ID]; dup {
				bad(lp, "location %q already defined at locations[%d]", l.ID, j)
			}
			seenLoc[l.ID] = i
		}
	}

	// Limits for both operating states: the state may change at run time,
	// and a graded zone's limits follow it.
	s.limits = map[string][]SizeLimit{}
	for _, st := range []string{AtRest, InOperation} {
		var ls []SizeLimit
		for _, size := range s.sizes {
			sl := SizeLimit{SizeUM: size}
			lim, err := s.limitAt(st, size)
			if err != nil {
				if st == s.base {
					bad(fmt.Sprintf(".sizes[%d]", sizeIdx[size]), "%v", err)
				}
			} else if lim.Specified {
				v := lim.PerM3
				sl.Limit = &v
				s.hasLimit = true
			} else {
				sl.Note = lim.Note
				// An ISO blank cell is not a zero: the standard does not
				// support classifying there, so refuse rather than invent
				// a limit. A GMP cell left to the site (grade D in
				// operation) is accepted and judged on levels only.
				if st == s.base && s.hasClass {
					bad(fmt.Sprintf(".sizes[%d]", sizeIdx[size]), "ISO class %s (%s edition) has no limit at %s µm: %s", classify.FormatSize(s.class), s.edition, classify.FormatSize(size), strings.TrimPrefix(lim.Note, "no limit: "))
				}
			}
			ls = append(ls, sl)
		}
		s.limits[st] = ls
	}

	// Levels: checked against the limits of the configured state.
	keys := make([]string, 0, len(z.Levels))
	for k := range z.Levels {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, key := range keys {
		lv := z.Levels[key]
		lp := ".levels." + key
		size, err := classify.ParseSize(key)
		if err != nil {
			bad(lp, "%v", err)
			continue
		}
		if !seenSize[size] {
			bad(lp, "%s µm is not one of the zone's sizes", classify.FormatSize(size))
			continue
		}
		if lv.Alert == nil && lv.Action == nil {
			bad(lp, "give an alert level, an action level or both")
			continue
		}
		var limit *float64
		for _, sl := range s.limits[s.base] {
			if sl.SizeUM == size {
				limit = sl.Limit
			}
		}
		okLevels := true
		if lv.Alert != nil && (math.IsNaN(*lv.Alert) || *lv.Alert < 0) {
			bad(lp+".alert", "%v: a level is a concentration ≥ 0 particles/m³", *lv.Alert)
			okLevels = false
		}
		if lv.Action != nil && (math.IsNaN(*lv.Action) || *lv.Action <= 0) {
			bad(lp+".action", "%v: a level is a concentration > 0 particles/m³", *lv.Action)
			okLevels = false
		}
		if !okLevels {
			continue
		}
		if lv.Alert != nil && lv.Action != nil && *lv.Alert > *lv.Action {
			bad(lp+".alert", "alert level %g is above the action level %g: the alert level warns before action is needed", *lv.Alert, *lv.Action)
		}
		if limit != nil {
			if lv.Action != nil && *lv.Action > *limit {
				bad(lp+".action", "action level %g is above the %s limit %g at %s µm (ISO 14644-2: levels sit at or below the limit)", *lv.Action, s.describe(), *limit, classify.FormatSize(size))
			}
			if lv.Alert != nil && *lv.Alert > *limit {
				bad(lp+".alert", "alert level %g is above the %s limit %g at %s µm (ISO 14644-2: levels sit at or below the limit)", *lv.Alert, s.describe(), *limit, classify.FormatSize(size))
			}
		}
	}
	for _, st := range []string{AtRest, InOperation} {
		for i := range s.limits[st] {
			applyLevels(&s.limits[st][i], z.Levels)
		}
	}
	return s, errs
}

// applyLevels fills the alert and action levels in force at one size.
func applyLevels(sl *SizeLimit, levels map[string]Levels) {
	for key, lv := range levels {
		size, err := classify.ParseSize(key)
		if err != nil || size != sl.SizeUM {
			continue
		}
		if lv.Alert != nil {
			v := *lv.Alert
			sl.Alert = &v
		}
		if lv.Action != nil {
			v := *lv.Action
			sl.Action = &v
		}
	}
	// A graded zone's limit may fall below a level set for its other
	// operating state; the limit then governs.
	if sl.Limit != nil && (sl.Action == nil || *sl.Action > *sl.Limit) {
		v := *sl.Limit
		sl.Action = &v
	}
}

// limitAt is the class or grade limit at one size for one operating state.
func (s *zoneSpec) limitAt(state string, size float64) (classify.Limit, error) {
	switch {
	case s.hasClass:
		return classify.ISOLimit(s.class, size, s.edition)
	case s.grade != "":
		return classify.GMPLimit(s.grade, state, classify.GMPMonitoring, size)
	}
	return classify.Limit{Note: "unclassified zone"}, nil
}

func (s *zoneSpec) describe() string {
	switch {
	case s.hasClass:
		return "ISO class " + classify.FormatSize(s.class)
	case s.grade != "":
		return "grade " + s.grade + " " + s.base
	}
	return "unclassified"
}

func sortFloat64s(v []float64) {
	for i := 1; i < len(v); i++ {
		for j := i; j > 0 && v[j] < v[j-1]; j-- {
			v[j], v[j-1] = v[j-1], v[j]
		}
	}
}

package collector

import (
	"bytes"
	"errors"
	"regexp"
	"strings"
	"testing"
)

// goNames matches what a refusal must never show a sender: names of the
// program's types, of Go's types, or of the decoder's internals.
var goNames = regexp.MustCompile(`float64|float32|u?int(8|16|32|64)?\b|map\[|\[\]|struct|Raw(Reading|Pressure)|collector\.|main\.|jsontext|json:|Go value|unmarshal|reflect|\*`)

// hostile is one refused body: where the refusal must point and why.
type hostile struct {
	name   string
	body   string
	ndjson bool
	index  int
	field  string
	rule   string
}

// r builds a reading from fragments: the good reading with keys replaced.
func r(frags ...string) string {
	m := map[string]string{
		"counter": `"pc-asm-1"`, "time": `"2026-03-02T10:00:00Z"`, "volume_l": `28.3`,
		"counts": `{"0.5":310,"1":80,"5":2}`,
	}
	order := []string{"counter", "time", "volume_l", "counts"}
	var extra []string
	for _, f := range frags {
		k, v, _ := strings.Cut(f, "=")
		if _, ok := m[k]; !ok {
			extra = append(extra, k)
		}
		m[k] = v
	}
	var b strings.Builder
	b.WriteByte('{')
	for i, k := range append(order, extra...) {
		if m[k] == "-" {
			continue
		}
		if i > 0 && b.Len() > 1 {
			b.WriteByte(',')
		}
		b.WriteString(`"` + k + `":` + m[k])
	}
	b.WriteByte('}')
	return b.String()
}

func p(frags ...string) string {
	m := map[string]string{"sensor": `"dp-asm-gown"`, "time": `"2026-03-02T10:00:00Z"`, "pa": `12.4`}
	order := []string{"sensor", "time", "pa"}
	for _, f := range frags {
		k, v, _ := strings.Cut(f, "=")
		if _, ok := m[k]; !ok {
			order = append(order, k)
		}
		m[k] = v
	}
	var parts []string
	for _, k := range order {
		if m[k] != "-" {
			parts = append(parts, `"`+k+`":`+m[k])
		}
	}
	return "{" + strings.Join(parts, ",") + "}"
}

var hostileReadings = []hostile{
	// Keys given twice or in another case: last-one-wins would store the
	// second value silently.
	{"counter twice", `{"counter":"pc-asm-1","counter":"pc-asm-2","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.5":1,"1":0,"5":0}}`, false, 0, "counter", RuleDuplicateKey},
	{"volume twice", r(`counts={"0.5":1,"1":0,"5":0},"volume_l":1e-300`), false, 0, "volume_l", RuleDuplicateKey},
	{"count key twice", r(`counts={"0.5":1,"0.5":9,"1":0,"5":0}`), false, 0, "counts.0.5", RuleDuplicateKey},
	{"duplicate in the second element", "[" + good + "," + r(`time="2026-03-02T10:00:00Z","time":"2026-03-02T09:00:00Z"`) + "]", false, 1, "time", RuleDuplicateKey},
	{"duplicate on an NDJSON line", good + "\n" + good + "\n" + r(`status="ok","status":"fault"`), true, 2, "status", RuleDuplicateKey},
	{"COUNTER upper case", strings.Replace(good, `"counter"`, `"COUNTER"`, 1), false, 0, "COUNTER", RuleCaseVariant},
	{"Volume_L mixed case", strings.Replace(good, `"volume_l"`, `"Volume_L"`, 1), false, 0, "Volume_L", RuleCaseVariant},
	{"Time title case", strings.Replace(good, `"time"`, `"Time"`, 1), false, 0, "Time", RuleCaseVariant},
	{"Counts upper", strings.Replace(good, `"counts"`, `"COUNTS"`, 1), false, 0, "COUNTS", RuleCaseVariant},
	{"case variant beside the right key", r(`Counter="pc-asm-2"`), false, 0, "Counter", RuleCaseVariant},
	{"unknown key", r(`volume_m3=1`), false, 0, "volume_m3", RuleUnknownKey},
	{"unknown key in the third element", "[" + good + "," + good + "," + r(`zone="x"`) + "]", false, 2, "zone", RuleUnknownKey},
	// Values of the wrong kind.
	{"volume as a string", r(`volume_l="28.3"`), false, 0, "volume_l", RuleType},
	{"counter as a number", r(`counter=7`), false, 0, "counter", RuleType},
	{"counts as an array", r(`counts=[1,2,3]`), false, 0, "counts", RuleType},
	{"time as an object", r(`time={}`), false, 0, "time", RuleType},
	{"volume out of range", r(`volume_l=1e400`), false, 0, "volume_l", RuleType},
	{"flow as a boolean", r(`flow_lpm=true`), false, 0, "flow_lpm", RuleType},
	{"element a number", `[` + good + `,5]`, false, 1, "", RuleType},
	// Malformed bodies.
	{"truncated array", "[" + good + "," + good, false, 2, "", RuleSyntax},
	{"junk after the object", good + "x", false, 0, "", RuleSyntax},
	{"two objects on a line", good + good, true, 0, "", RuleSyntax},
	{"invalid UTF-8 in a key", `{"counter":"pc-asm-1","time":"2026-03-02T10:00:00Z","volume_l":28.3,"counts":{"0.5` + "\xff" + `":1}}`, false, 0, "counts", RuleSyntax},
	{"raw control character in a string", "{\"counter\":\"pc\x01\"}", false, 0, "counter", RuleSyntax},
	{"empty body", "", false, 0, "", RuleSyntax},
	{"a bare string", `"hello"`, false, 0, "", RuleSyntax},
	// Free text with control characters, escaped so JSON allows them.
	{"NUL in the counter", r(`counter="pc-asm-1\u0000"`), false, 0, "counter", RuleText},
	{"LF in the counter", r(`counter="pc-asm-1\nforged line"`), false, 0, "counter", RuleText},
	{"CR in the status", r(`status="ok\r"`), false, 0, "status", RuleText},
	{"escape in the mode", r(`mode="\u001b[31mcumulative"`), false, 0, "mode", RuleText},
	{"NUL in the time", r(`time="2026-03-02T10:00:00Z\u0000"`), false, 0, "time", RuleText},
	{"line separator in a count key", r(`counts={"0.5\u2028":1,"1":0,"5":0}`), false, 0, "counts.0.5\u2028", RuleText},
	{"overlong counter", r(`counter="` + strings.Repeat("a", 300) + `"`), false, 0, "counter", RuleText},
	// Missing and unknown.
	{"no counter", r(`counter=-`), false, 0, "counter", RuleRequired},
	{"no volume", r(`volume_l=-`), false, 0, "volume_l", RuleRequired},
	{"volume null", r(`volume_l=null`), false, 0, "volume_l", RuleRequired},
	{"no counts", r(`counts={}`), false, 0, "counts", RuleRequired},
	{"unknown counter", r(`counter="pc-9"`), false, 0, "counter", RuleUnknownID},
	{"bad mode", r(`mode="sideways"`), false, 0, "mode", RuleEnum},
	{"bad status", r(`status="great"`), false, 0, "status", RuleEnum},
	// Times.
	{"time without a zone", r(`time="2026-03-02T10:00:00"`), false, 0, "time", RuleTimeFormat},
	{"time in the far future", r(`time="2099-01-01T00:00:00Z"`), false, 0, "time", RuleTimeFuture},
	{"time beyond the skew", r(`time="2026-03-02T10:06:01Z"`), false, 0, "time", RuleTimeFuture},
	{"time before retention", r(`time="2026-01-01T00:00:00Z"`), false, 0, "time", RuleTimeRetention},
	{"year one", r(`time="0001-01-01T00:00:00Z"`), false, 0, "time", RuleTimeRetention},
	// Volume, flow and sampling time against physics and the counter.
	{"volume 1e-300", r(`volume_l=1e-300`), false, 0, "volume_l", RuleVolumeDrawable},
	{"volume 1e308", r(`volume_l=1e308`), false, 0, "volume_l", RuleVolumeDrawable},
	{"volume zero", r(`volume_l=0`), false, 0, "volume_l", RuleVolumePositive},
	{"volume negative", r(`volume_l=-28.3`), false, 0, "volume_l", RuleVolumePositive},
	{"volume of an hour at 1 min", r(`volume_l=1698`), false, 0, "volume_l", RuleVolumeDrawable},
	{"volume 6 % over nominal × 60 s", r(`volume_l=30.0`, `sample_s=60`), false, 0, "volume_l", RuleVolumeDrawable},
	{"volume 6 % under nominal × 60 s", r(`volume_l=26.6`, `sample_s=60`), false, 0, "volume_l", RuleVolumeDrawable},
	{"volume against flow × time", r(`volume_l=40`, `flow_lpm=28.3`, `sample_s=60`), false, 0, "volume_l", RuleVolumeConsistent},
	{"flow 1e300", r(`flow_lpm=1e300`), false, 0, "flow_lpm", RuleFlowRange},
	{"flow negative", r(`flow_lpm=-1`), false, 0, "flow_lpm", RuleFlowRange},
	{"flow three times nominal", r(`flow_lpm=85`), false, 0, "flow_lpm", RuleFlowRange},
	{"sampling time of a day", r(`sample_s=86400`), false, 0, "sample_s", RuleSampleTime},
	{"sampling time negative", r(`sample_s=-60`), false, 0, "sample_s", RuleSampleTime},
	// Counts.
	{"count negative", r(`counts={"0.5":-1,"1":0,"5":0}`), false, 0, "counts.0.5", RuleCount},
	{"count fraction", r(`counts={"0.5":1.5,"1":0,"5":0}`), false, 0, "counts.0.5", RuleCount},
	{"count as a string", r(`counts={"0.5":"1","1":0,"5":0}`), false, 0, "counts.0.5", RuleCount},
	{"count beyond 2^53", r(`counts={"0.5":9007199254740993,"1":0,"5":0}`), false, 0, "counts.0.5", RuleCount},
	{"channel the counter lacks", r(`counts={"0.5":1,"1":0,"5":0,"0.3":4}`), false, 0, "counts.0.3", RuleChannel},
	{"channel given twice in two spellings", r(`counts={"0.5":1,"0.5um":1,"1":0,"5":0}`), false, 0, "counts.0.5um", RuleChannel},
	{"channel missing", r(`counts={"0.5":1,"1":0}`), false, 0, "counts.5", RuleChannel},
	{"not a size", r(`counts={"big":1,"0.5":1,"1":0,"5":0}`), false, 0, "counts.big", RuleChannel},
	{"cumulative rising", r(`counts={"0.5":1,"1":10,"5":0}`), false, 0, "counts.1", RuleCumulativeOrder},
	{"concentration beyond max × margin", r(`counts={"0.5":9000000000000,"1":0,"5":0}`), false, 0, "counts.0.5", RuleConcentrationMax},
	{"hood beyond its own max × 10", strings.Replace(r(`counts={"0.3":1200000,"0.5":0,"5":0}`), "pc-asm-1", "pc-hood", 1), false, 0, "counts.0.3", RuleConcentrationMax},
}

var hostilePressure = []hostile{
	{"pa twice (a stored reversal)", `{"sensor":"dp-asm-gown","time":"2026-03-02T10:00:00Z","pa":12,"pa":-50}`, false, 0, "pa", RuleDuplicateKey},
	{"sensor twice", `{"sensor":"dp-asm-gown","sensor":"dp-met-asm","time":"2026-03-02T10:00:00Z","pa":12}`, false, 0, "sensor", RuleDuplicateKey},
	{"PA upper case", p(`pa=-`, `PA=12`), false, 0, "PA", RuleCaseVariant},
	{"Sensor title case", p(`sensor=-`, `Sensor="dp-asm-gown"`), false, 0, "Sensor", RuleCaseVariant},
	{"pa 1e300", p(`pa=1e300`), false, 0, "pa", RulePressureRange},
	{"pa -6000", p(`pa=-6000`), false, 0, "pa", RulePressureRange},
	{"pa 5000.1", "[" + p() + "," + p(`pa=5000.1`) + "]", false, 1, "pa", RulePressureRange},
	{"pa 1e999", p(`pa=1e999`), false, 0, "pa", RuleType},
	{"pa as a string", p(`pa="12"`), false, 0, "pa", RuleType},
	{"pa missing", p(`pa=-`), false, 0, "pa", RuleRequired},
	{"NUL in the sensor", p(`sensor="dp\u0000"`), false, 0, "sensor", RuleText},
	{"unknown sensor", p(`sensor="dp-x"`), false, 0, "sensor", RuleUnknownID},
	{"time in the future", p(`time="2027-01-01T00:00:00Z"`), true, 0, "time", RuleTimeFuture},
	{"unknown key on line 2", p() + "\n" + p(`note="x"`), true, 1, "note", RuleUnknownKey},
}

// TestHostileInput feeds refused bodies to the decoder and validator:
// every refusal must name the element, the field and the rule, and show
// no name of the program's internals.
func TestHostileInput(t *testing.T) {
	if n := len(hostileReadings) + len(hostilePressure); n < 60 {
		t.Fatalf("only %d hostile cases", n)
	}
	in := newTestIngest(t, newMemSink(), IngestOptions{})
	check := func(t *testing.T, c hostile, seen int, err error) {
		t.Helper()
		var ie *InputError
		if !errors.As(err, &ie) {
			t.Fatalf("error %v, want an input error", err)
		}
		if ie.Index != c.index || ie.Field != c.field || ie.Rule != c.rule {
			t.Fatalf("index %d field %q rule %q, want %d %q %q: %v", ie.Index, ie.Field, ie.Rule, c.index, c.field, c.rule, ie)
		}
		if m := goNames.FindString(ie.Error()); m != "" {
			t.Errorf("message shows %q: %v", m, ie)
		}
		if !strings.Contains(ie.Error(), "[rule "+c.rule+"]") {
			t.Errorf("message does not name the rule: %v", ie)
		}
	}
	for _, c := range hostileReadings {
		t.Run("readings/"+c.name, func(t *testing.T) {
			v := in.validator()
			seen, err := decodeBody(bytes.NewReader([]byte(c.body)), fuzzFormat(c.ndjson), fuzzMaxBody, func(i int, raw *RawReading) *InputError {
				var out Reading
				return v.reading(i, raw, &out)
			})
			check(t, c, seen, err)
		})
	}
	for _, c := range hostilePressure {
		t.Run("pressure/"+c.name, func(t *testing.T) {
			v := in.validator()
			seen, err := decodeBody(bytes.NewReader([]byte(c.body)), fuzzFormat(c.ndjson), fuzzMaxBody, func(i int, raw *RawPressure) *InputError {
				var out Pressure
				return v.pressure(i, raw, &out)
			})
			check(t, c, seen, err)
		})
	}
}

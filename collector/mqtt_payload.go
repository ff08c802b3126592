package collector

import (
	"bytes"
	"errors"
	"maps"
	"math"
	"strconv"
	"time"

	jsonv2 "github.com/go-json-experiment/json"
	"github.com/go-json-experiment/json/jsontext"
)

// mqttBatch is the decoded content of one message: exactly one of the
// slices is set, as the topic's kind says.
type mqttBatch struct {
	readings []RawReading
	pressure []RawPressure
	env      []RawEnvironment
}

func (b *mqttBatch) len() int { return len(b.readings) + len(b.pressure) + len(b.env) }

// decodePayload decodes a message of topic t: our own JSON (an object or
// an array, decoded as an HTTP body is) or, with a field mapping, a flat
// object of the topic's instrument.
func decodePayload(t *mqttTopic, payload []byte, reg *Registry) (mqttBatch, *InputError) {
	if len(t.Fields) > 0 {
		return decodeFlat(t, payload, reg)
	}
	var b mqttBatch
	var err error
	r := bytes.NewReader(payload)
	max := len(payload) + 1
	switch t.kind {
	case MQTTReadings:
		_, err = decodeBody(r, formatJSON, max, func(i int, raw *RawReading) *InputError {
			c := *raw
			c.Counts = maps.Clone(raw.Counts) // the decoder reuses the map
			b.readings = append(b.readings, c)
			return ownedBy(i, "counter", &b.readings[len(b.readings)-1].Counter, t.id)
		})
	case MQTTPressure:
		_, err = decodeBody(r, formatJSON, max, func(i int, raw *RawPressure) *InputError {
			b.pressure = append(b.pressure, *raw)
			return ownedBy(i, "sensor", &b.pressure[len(b.pressure)-1].Sensor, t.id)
		})
	default:
		_, err = decodeBody(r, formatJSON, max, func(i int, raw *RawEnvironment) *InputError {
			b.env = append(b.env, *raw)
			return ownedBy(i, "sensor", &b.env[len(b.env)-1].Sensor, t.id)
		})
	}
	if err != nil {
		var ie *InputError
		if errors.As(err, &ie) {
			return b, ie
		}
		return b, inputErrRule(0, "", RuleSyntax, "%v", err)
	}
	return b, nil
}

// ownedBy fills in the instrument of an element from the topic, or refuses
// an element that names another one than the topic carries.
func ownedBy(i int, field string, id *string, topicID string) *InputError {
	switch {
	case topicID == "":
		return nil
	case *id == "":
		*id = topicID
	case *id != topicID:
		return inputErrRule(i, field, RuleTopicInstrument, "%q, but the topic carries %q", *id, topicID)
	}
	return nil
}

// decodeFlat reads a flat object of one instrument through the topic's
// field mapping. Duplicate field names are refused (a strict decoder);
// fields the mapping does not read are ignored.
func decodeFlat(t *mqttTopic, payload []byte, reg *Registry) (mqttBatch, *InputError) {
	var b mqttBatch
	var obj map[string]jsontext.Value
	if err := jsonv2.Unmarshal(payload, &obj); err != nil {
		return b, inputErrRule(0, "", RuleSyntax, "a flat payload must be one JSON object with unique field names: %v", err)
	}
	if obj == nil {
		return b, inputErrRule(0, "", RuleSyntax, "a flat payload must be one JSON object, not null")
	}
	f := flatReader{t: t, obj: obj}
	when, ie := f.time()
	if ie != nil {
		return b, ie
	}
	switch t.kind {
	case MQTTReadings:
		ci, _ := reg.Counter(t.id)
		raw := RawReading{Counter: t.id, Time: when, Counts: make(map[string]Count, len(ci.Keys))}
		if raw.VolumeL, ie = f.number("volume_l"); ie != nil {
			return b, ie
		}
		for _, fl := range []struct {
			ch  string
			dst *float64
		}{{"flow_lpm", &raw.FlowLPM}, {"sample_s", &raw.SampleS}} {
			v, ie := f.number(fl.ch)
			if ie != nil {
				return b, ie
			}
			if v != nil {
				*fl.dst = *v
			}
		}
		for _, ch := range []struct {
			name string
			dst  *string
		}{{"status", &raw.Status}, {"mode", &raw.Mode}} {
			if *ch.dst, ie = f.text(ch.name); ie != nil {
				return b, ie
			}
		}
		for _, k := range ci.Keys {
			v, ok := obj[f.name(k)]
			if !ok {
				continue // validation names the missing channel
			}
			var c Count
			_ = c.UnmarshalJSON(bytes.TrimSpace(v)) // never fails: validation judges it
			raw.Counts[k] = c
		}
		b.readings = []RawReading{raw}
	case MQTTPressure:
		pa, ie := f.number("pa")
		if ie != nil {
			return b, ie
		}
		b.pressure = []RawPressure{{Sensor: t.id, Time: when, Pa: pa}}
	default:
		raw := RawEnvironment{Sensor: t.id, Time: when}
		for _, ch := range []struct {
			name string
			dst  **float64
		}{{ChanTemperature, &raw.TemperatureC}, {ChanHumidity, &raw.HumidityPct}, {ChanVelocity, &raw.VelocityMS}} {
			if *ch.dst, ie = f.number(ch.name); ie != nil {
				return b, ie
			}
		}
		b.env = []RawEnvironment{raw}
	}
	return b, nil
}

// flatReader reads channels of a flat object through a field mapping.
type flatReader struct {
	t   *mqttTopic
	obj map[string]jsontext.Value
}

// name returns the payload field a channel is read from.
func (f flatReader) name(ch string) string {
	if n, ok := f.t.Fields[ch]; ok {
		return n
	}
	return ch
}

// field names a channel's payload field in errors: "ts (time)".
func (f flatReader) field(ch string) string {
	if n := f.name(ch); n != ch {
		return n + " (" + ch + ")"
	}
	return ch
}

// number reads a numeric channel; nil when absent.
func (f flatReader) number(ch string) (*float64, *InputError) {
	v, ok := f.obj[f.name(ch)]
	if !ok {
		return nil, nil
	}
	if v.Kind() != '0' {
		return nil, inputErrRule(0, f.field(ch), RuleType, "must be a number, not %s", v)
	}
	n, err := strconv.ParseFloat(string(v), 64)
	if err != nil || math.IsInf(n, 0) {
		return nil, inputErrRule(0, f.field(ch), RuleType, "%s is not a finite number", v)
	}
	return &n, nil
}

// text reads a string channel; "" when absent.
func (f flatReader) text(ch string) (string, *InputError) {
	v, ok := f.obj[f.name(ch)]
	if !ok {
		return "", nil
	}
	var s string
	if v.Kind() != '"' || jsonv2.Unmarshal(v, &s) != nil {
		return "", inputErrRule(0, f.field(ch), RuleType, "must be a string, not %s", v)
	}
	return s, nil
}

// time reads the time channel: an RFC 3339 string, or a number of Unix
// seconds as many gateways send.
func (f flatReader) time() (string, *InputError) {
	v, ok := f.obj[f.name("time")]
	if !ok {
		return "", nil // validation says it is missing
	}
	if v.Kind() == '0' {
		s, err := strconv.ParseFloat(string(v), 64)
		if err != nil || !finite(s) || s <= 0 || s > 1e11 {
			return "", inputErrRule(0, f.field("time"), RuleTimeFormat, "%s is not a time in Unix seconds", v)
		}
		sec, frac := math.Modf(s)
		return time.Unix(int64(sec), int64(math.Round(frac*1e9))).UTC().Format(time.RFC3339Nano), nil
	}
	return f.text("time")
}

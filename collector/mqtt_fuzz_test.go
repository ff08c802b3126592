package collector

import "testing"

// FuzzMQTTPayload: any payload on a flat or an own-JSON topic is either
// refused with an error naming element and field, or decoded into data of
// the topic's instrument only.
func FuzzMQTTPayload(f *testing.F) {
	for _, s := range []string{
		`{"v":0.44,"ts":1772442000}`, `{"v":"x"}`, `[{"sensor":"av-hood","time":"2026-03-02T09:00:00Z","velocity_m_s":0.4}]`,
		`{"sensor":"th-asm"}`, `{"v":1,"v":2}`, `null`, `{"ts":1e300}`,
	} {
		f.Add(s, true)
		f.Add(s, false)
	}
	reg := demoEnvRegistry(f)
	flat := resolveTopic("t", MQTTTopic{Topic: "x", Sensor: "av-hood", Fields: map[string]string{"velocity_m_s": "v", "time": "ts"}}, reg, func(string, string, ...any) {})
	own := resolveTopic("t", MQTTTopic{Topic: "y", Sensor: "av-hood"}, reg, func(string, string, ...any) {})
	f.Fuzz(func(t *testing.T, payload string, isFlat bool) {
		top := &own
		if isFlat {
			top = &flat
		}
		b, ie := decodePayload(top, []byte(payload), reg)
		if ie != nil {
			if ie.Msg == "" || ie.Index < 0 {
				t.Fatalf("error without a message or index: %+v", ie)
			}
			return
		}
		if len(b.readings)+len(b.pressure) != 0 {
			t.Fatalf("environment topic decoded readings or pressure: %+v", b)
		}
		for _, e := range b.env {
			if e.Sensor != "av-hood" {
				t.Fatalf("a sample of %q on av-hood's topic", e.Sensor)
			}
		}
	})
}

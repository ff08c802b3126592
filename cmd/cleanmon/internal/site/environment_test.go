package site

import (
	"strings"
	"testing"
)

// TestEnvironmentAndMQTTSections: the environment and mqtt sections load
// into the configuration, and their problems are reported at file:line:col
// with their path, like every other section's.
func TestEnvironmentAndMQTTSections(t *testing.T) {
	good := baseSite + strings.Join([]string{
		/* 16 */ `environment:`,
		/* 17 */ `  - id: th-h`,
		/* 18 */ `    zone: hood`,
		/* 19 */ `    kind: temperature-humidity`,
		/* 20 */ `    temperature_c: {alert: {low: 20.3, high: 21.7}, action: {low: 20, high: 22}}`,
		/* 21 */ `    humidity_pct: {action: {low: 40, high: 50}}`,
		/* 22 */ `mqtt:`,
		/* 23 */ `  broker: tcp://127.0.0.1:1883`,
		/* 24 */ `  client_id: cleanmon-test`,
		/* 25 */ `  topics:`,
		/* 26 */ `    - {topic: c/th-h, sensor: th-h, fields: {temperature_c: t}}`,
	}, "\n") + "\n"
	cfg, err := Load("site.yaml", []byte(good))
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Environment) != 1 || cfg.MQTT == nil || len(cfg.MQTT.Topics) != 1 {
		t.Fatalf("sections not loaded: %+v %+v", cfg.Environment, cfg.MQTT)
	}
	rules := cfg.EnvironmentRules()
	if len(rules) != 1 || *rules[0].Limits["temperature_c"].Action.High != 22 || rules[0].Limits["humidity_pct"].Alert != nil {
		t.Fatalf("rules %+v", rules)
	}
	if _, err := cfg.Registry(); err != nil {
		t.Fatal(err)
	}

	cases := []struct {
		name, from, to, want string
	}{
		{"band inverted", `action: {low: 20, high: 22}}`, `action: {low: 23, high: 22}}`, "site.yaml:20:"},
		{"unknown zone", `    zone: hood`, `    zone: lobby`, "site.yaml:18:11: environment[0].zone"},
		{"unknown kind", `    kind: temperature-humidity`, `    kind: thermo`, "site.yaml:19:11: environment[0].kind"},
		{"topic of an unknown sensor", `sensor: th-h, fields`, `sensor: th-x, fields`, "site.yaml:26:"},
		{"unknown mqtt key", `  client_id: cleanmon-test`, `  clientid: cleanmon-test`, "site.yaml:24:3: mqtt.clientid: unknown key"},
		{"counter on mqtt no topic carries", `location: h-1, sizes`, `location: h-1, source: mqtt, sizes`, "site.yaml:10:"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			bad := strings.Replace(good, c.from, c.to, 1)
			if bad == good {
				t.Fatalf("%q not in the base text", c.from)
			}
			_, err := Load("site.yaml", []byte(bad))
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("err %v, want a problem at %s", err, c.want)
			}
		})
	}
	// th-h on mqtt is carried by its topic: accepted.
	ok := strings.Replace(good, "    kind: temperature-humidity", "    kind: temperature-humidity\n    source: mqtt", 1)
	if _, err := Load("site.yaml", []byte(ok)); err != nil {
		t.Fatalf("an environment sensor on mqtt with its topic refused: %v", err)
	}
}

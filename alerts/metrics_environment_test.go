package alerts

import (
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil"
)

// TestEnvironmentMetrics: the latest sample of each sensor, humidity as a
// ratio (45 % RH is 0.45), an older sample ignored.
func TestEnvironmentMetrics(t *testing.T) {
	m := NewEnvironmentMetrics(map[string]string{"th-asm": "assembly", "av-hood": "coating-hood"})
	m.Observe([]EnvironmentObservation{
		{Sensor: "th-asm", Time: engT0.Add(time.Minute), Values: map[string]float64{ChanTemperature: 21.25, ChanHumidity: 45}},
		{Sensor: "th-asm", Time: engT0, Values: map[string]float64{ChanTemperature: 30, ChanHumidity: 90}},
		{Sensor: "av-hood", Time: engT0, Values: map[string]float64{ChanVelocity: 0.45}},
		{Sensor: "th-x", Time: engT0, Values: map[string]float64{ChanTemperature: 1}},
	})
	want := `
# HELP cleanmon_air_velocity_meters_per_second Latest airflow velocity (m/s) of an environment sensor.
# TYPE cleanmon_air_velocity_meters_per_second gauge
cleanmon_air_velocity_meters_per_second{sensor="av-hood",zone="coating-hood"} 0.45
# HELP cleanmon_relative_humidity_ratio Latest relative humidity of an environment sensor, as a ratio (0.45 is 45 % RH).
# TYPE cleanmon_relative_humidity_ratio gauge
cleanmon_relative_humidity_ratio{sensor="th-asm",zone="assembly"} 0.45
# HELP cleanmon_temperature_celsius Latest temperature (°C) of an environment sensor.
# TYPE cleanmon_temperature_celsius gauge
cleanmon_temperature_celsius{sensor="th-asm",zone="assembly"} 21.25
`
	if err := testutil.CollectAndCompare(m, strings.NewReader(want), "cleanmon_temperature_celsius", "cleanmon_relative_humidity_ratio", "cleanmon_air_velocity_meters_per_second"); err != nil {
		t.Fatal(err)
	}
}

package alerts

import (
	"context"
	"encoding/json"
	"fmt"
	"maps"
	"strconv"
	"time"
)

// DefaultHeartbeat is how often the daemon tells its receivers it is
// alive when the configuration names no period.
const DefaultHeartbeat = time.Minute

// HeartbeatAlertName is the alertname of the heartbeat posted to
// Alertmanager: route it to a dead-man's switch, which raises "monitoring
// lost" when it stops arriving.
const HeartbeatAlertName = "cleanmon_heartbeat"

// Heartbeat is one "still watching" message. Severity is the urgency a
// receiver should give the daemon's silence: that of the worst open alarm
// (action), and at least alert, since a cleanroom nobody watches is itself
// something a person must look at.
type Heartbeat struct {
	Time       time.Time `json:"time"`
	Severity   string    `json:"severity"`
	OpenAlarms int       `json:"open_alarms"`
	// Every is the heartbeat period: a receiver should raise its alarm
	// after two or three periods without one.
	Every time.Duration `json:"-"`
}

// MarshalJSON writes Every in seconds.
func (h Heartbeat) MarshalJSON() ([]byte, error) {
	type plain Heartbeat
	return json.Marshal(struct {
		plain
		EverySeconds float64 `json:"every_seconds"`
	}{plain(h), h.Every.Seconds()})
}

// Heartbeater is a notifier that can carry the daemon's heartbeat.
type Heartbeater interface {
	Name() string
	Beat(ctx context.Context, hb Heartbeat) error
}

// HeartbeatOf is the heartbeat for a set of open alarms.
func HeartbeatOf(open []Alarm, now time.Time, every time.Duration) Heartbeat {
	hb := Heartbeat{Time: now.UTC(), Severity: LevelAlert, Every: every}
	for _, a := range open {
		if a.State == StateDelayed {
			continue
		}
		hb.OpenAlarms++
		if a.Level == LevelAction {
			hb.Severity = LevelAction
		}
	}
	return hb
}

// RunHeartbeat sends a heartbeat to every one of hs every period (at once
// first) until ctx is done, built from the open alarms of open. A failed
// beat is not retried: the next one follows a period later, and a
// receiver misses beats only while something is wrong. It sends nothing
// when ctx ends: the silence is the message.
func RunHeartbeat(ctx context.Context, hs []Heartbeater, every time.Duration, open func() []Alarm, now func() time.Time) {
	if every <= 0 {
		every = DefaultHeartbeat
	}
	if now == nil {
		now = time.Now
	}
	if len(hs) == 0 {
		return
	}
	tick := time.NewTicker(every)
	defer tick.Stop()
	for {
		hb := HeartbeatOf(open(), now(), every)
		for _, h := range hs {
			_ = h.Beat(ctx, hb)
		}
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
	}
}

// Beat posts the heartbeat as an alert that is always firing while the
// daemon runs, ending three periods after the beat: when the daemon stops,
// it resolves, and the dead-man's switch it is routed to notices.
func (a *Alertmanager) Beat(ctx context.Context, hb Heartbeat) error {
	labels := map[string]string{}
	maps.Copy(labels, a.cfg.Labels)
	labels["alertname"] = HeartbeatAlertName
	labels["severity"] = hb.Severity
	ann := map[string]string{
		"summary":     fmt.Sprintf("cleanmon is watching; %d open alarms. If this stops, monitoring is lost.", hb.OpenAlarms),
		"open_alarms": strconv.Itoa(hb.OpenAlarms),
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.post(ctx, []amAlert{{Labels: labels, Annotations: ann, StartsAt: hb.Time, EndsAt: hb.Time.Add(3 * hb.Every)}})
}

// WebhookHeartbeat is the JSON body of a webhook heartbeat.
type WebhookHeartbeat struct {
	Version   int               `json:"version"`
	Heartbeat Heartbeat         `json:"heartbeat"`
	Severity  string            `json:"severity"`
	Labels    map[string]string `json:"labels,omitempty"`
}

// Beat posts the heartbeat, signed like a transition, under the delivery
// key "heartbeat/<unix nanoseconds>".
func (w *Webhook) Beat(ctx context.Context, hb Heartbeat) error {
	body, err := json.Marshal(WebhookHeartbeat{Version: WebhookMessageVersion, Heartbeat: hb, Severity: hb.Severity, Labels: w.cfg.Labels})
	if err != nil {
		return fmt.Errorf("%w: encoding heartbeat: %v", ErrRejected, err)
	}
	return w.post(ctx, "heartbeat/"+strconv.FormatInt(hb.Time.UnixNano(), 10), body)
}

package alerts

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"strconv"
	"time"
)

// CheckpointAlertName is the alertname under which a checkpoint of the
// audit chain reaches Alertmanager: route it to a receiver that keeps it
// (an archive, a ticket), away from the machine the daemon runs on.
const CheckpointAlertName = "cleanmon_audit_checkpoint"

// AuditCheckpoint is one published head of the audit chain. Line is its
// one-line form, which `cleanmon verify --head FILE` reads back: a kept
// copy off the machine is what finds a record cut back later.
type AuditCheckpoint struct {
	Seq  uint64    `json:"seq"`
	Time time.Time `json:"time"`
	Line string    `json:"line"`
}

// CheckpointPublisher is a notifier that can carry checkpoints.
type CheckpointPublisher interface {
	Name() string
	PublishCheckpoint(ctx context.Context, cp AuditCheckpoint) error
}

// PublishCheckpoint sends cp to every one of ps, and returns their
// failures joined (each naming its notifier). A failure is not retried:
// the next checkpoint follows.
func PublishCheckpoint(ctx context.Context, ps []CheckpointPublisher, cp AuditCheckpoint) error {
	var errs []error
	for _, p := range ps {
		if err := p.PublishCheckpoint(ctx, cp); err != nil {
			errs = append(errs, fmt.Errorf("notifier %s: %w", p.Name(), err))
		}
	}
	return errors.Join(errs...)
}

// WebhookCheckpoint is the JSON body of a webhook checkpoint.
type WebhookCheckpoint struct {
	Version    int               `json:"version"`
	Checkpoint AuditCheckpoint   `json:"checkpoint"`
	Labels     map[string]string `json:"labels,omitempty"`
}

// PublishCheckpoint posts the checkpoint, signed like a transition, under
// the delivery key "checkpoint/<seq>/<unix nanoseconds>".
func (w *Webhook) PublishCheckpoint(ctx context.Context, cp AuditCheckpoint) error {
	body, err := json.Marshal(WebhookCheckpoint{Version: WebhookMessageVersion, Checkpoint: cp, Labels: w.cfg.Labels})
	if err != nil {
		return fmt.Errorf("%w: encoding checkpoint: %v", ErrRejected, err)
	}
	return w.post(ctx, "checkpoint/"+strconv.FormatUint(cp.Seq, 10)+"/"+strconv.FormatInt(cp.Time.UnixNano(), 10), body)
}

// PublishCheckpoint posts the checkpoint as a short-lived alert of
// severity "info" with the line in its annotations.
func (a *Alertmanager) PublishCheckpoint(ctx context.Context, cp AuditCheckpoint) error {
	labels := map[string]string{}
	maps.Copy(labels, a.cfg.Labels)
	labels["alertname"] = CheckpointAlertName
	labels["severity"] = "info"
	ann := map[string]string{
		"summary":    "audit chain checkpoint " + strconv.FormatUint(cp.Seq, 10) + ": keep it off this machine",
		"checkpoint": cp.Line,
	}
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.post(ctx, []amAlert{{Labels: labels, Annotations: ann, StartsAt: cp.Time, EndsAt: cp.Time.Add(time.Minute)}})
}

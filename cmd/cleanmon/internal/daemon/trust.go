package daemon

import (
	"context"
	"crypto/ed25519"
	"errors"
	"fmt"
	"log/slog"
	"net/http"
	"strings"
	"sync"
	"time"

	"cleanmon/alerts"
	"cleanmon/cmd/cleanmon/internal/httpx"
	"cleanmon/store"
)

// errWritesRefused is a write refused because the store failed its
// integrity check: writing on a damaged or rewritten record would bury
// the fault under new entries.
var errWritesRefused = errors.New("writes refused")

// writeGate holds why writes are refused (an integrity fault, for the
// rest of the run) or failing (a full disk, until a commit succeeds), and
// tells the API's readiness of every change.
type writeGate struct {
	mu        sync.Mutex
	integrity string
	diskFull  string
	onChange  func(problem string)
}

// check is nil while writes are allowed. A nil gate allows everything.
func (g *writeGate) check() error {
	if g == nil {
		return nil
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.integrity != "" {
		return fmt.Errorf("%w: %s", errWritesRefused, g.integrity)
	}
	return nil
}

// refuse stops every write for the rest of the run.
func (g *writeGate) refuse(why string) {
	g.mu.Lock()
	if g.integrity == "" {
		g.integrity = why
	}
	g.mu.Unlock()
	g.changed()
}

// committed learns from a commit's outcome whether the disk is full.
func (g *writeGate) committed(err error) {
	if g == nil {
		return
	}
	g.mu.Lock()
	before := g.diskFull
	switch {
	case err == nil:
		g.diskFull = ""
	case errors.Is(err, store.ErrDiskFull):
		g.diskFull = "the disk is full: " + err.Error()
	}
	after := g.diskFull
	g.mu.Unlock()
	if before != after {
		g.changed()
	}
}

// problem is why writes are refused or failing, "" when they are not.
func (g *writeGate) problem() string {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.integrity != "" {
		return "writes refused: " + g.integrity
	}
	return g.diskFull
}

func (g *writeGate) changed() {
	g.mu.Lock()
	f := g.onChange
	g.mu.Unlock()
	if f != nil {
		f(g.problem())
	}
}

// middleware answers 503 naming the fault to every request under /api/v1
// that would write, while writes are refused. Reads go on.
func (g *writeGate) middleware(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		switch r.Method {
		case http.MethodGet, http.MethodHead, http.MethodOptions:
		default:
			if strings.HasPrefix(r.URL.Path, "/api/") {
				if err := g.check(); err != nil {
					httpx.WriteError(w, http.StatusServiceUnavailable, err.Error())
					return
				}
			}
		}
		next.ServeHTTP(w, r)
	})
}

// startTrust turns on the signed audit chain when a key is configured
// (warning when not), then checks the store quickly: a fault refuses
// writes for the run, and is raised as an alarm once the rules run.
func (d *Daemon) startTrust() error {
	a := d.cfg.Audit
	for _, f := range a.PublicKeyFiles {
		pub, err := store.LoadAuditPublicKey(f)
		if err != nil {
			return usage("audit.public_key_files: %v", err)
		}
		d.keys = append(d.keys, pub)
	}
	ctx := context.Background()
	if a.SigningKeyFile == "" {
		d.log.Warn("audit: no signing key (audit.signing_key_file): anyone who can write the data directory can rewrite or cut the record without it showing; make one with `cleanmon keygen`", "data", d.o.DataDir)
	} else {
		signer, err := store.LoadAuditSigner(a.SigningKeyFile)
		if err != nil {
			return usage("audit.signing_key_file: %v", err)
		}
		if err := d.st.UseAuditKey(ctx, signer, store.AuditActorSystem); err != nil {
			return fmt.Errorf("turning on the audit signature: %w", err)
		}
		d.log.Info("audit: entries are signed", "key_id", signer.KeyID(), "key_file", a.SigningKeyFile)
	}
	if err := d.st.CheckQuick(ctx, store.CheckOptions{Keys: d.keys}); err != nil {
		d.integrityFault(err)
	}
	return nil
}

// integrityFault refuses writes for the rest of the run and tells the
// operator what was found, what to run and which backup to restore; the
// integrity alarm follows once the rules run (raiseIntegrity).
func (d *Daemon) integrityFault(err error) {
	var ie *store.IntegrityError
	what, cmd := err.Error(), "cleanmon verify "+d.st.Path()
	if errors.As(err, &ie) {
		f := ie.Faults[0]
		what = fmt.Sprintf("%s: %s", f.Kind, f.Detail)
		if n := len(ie.Faults) - 1; n > 0 {
			what += fmt.Sprintf(" (and %d more)", n)
		}
		cmd = ie.VerifyCommand()
	} else {
		what = "the integrity check could not run: " + what
	}
	backup := "no backup is on record"
	switch b, ok, berr := d.st.LastBackup(); {
	case berr != nil:
		backup = "the record of backups cannot be read from the damaged store: take the newest file `cleanmon backup` wrote and check it with `cleanmon verify --file` first"
	case ok:
		backup = fmt.Sprintf("latest backup on record: %s, taken %s", b.Subject, b.Time.UTC().Format(time.RFC3339))
	}
	msg := fmt.Sprintf("store integrity fault: %s; stop the daemon and run `%s`, then restore the latest verified backup (%s)", what, cmd, backup)
	d.gate.refuse(msg)
	d.log.Error("store integrity fault: writes are refused, reads go on", "fault", what, "verify", cmd, "backup", backup)
	d.faultMu.Lock()
	d.faultMsg = msg
	d.faultMu.Unlock()
	if d.alarms != nil && d.bg != nil {
		d.raiseIntegrity()
	}
}

// damaged reports whether an integrity fault was found.
func (d *Daemon) damaged() bool {
	d.faultMu.Lock()
	defer d.faultMu.Unlock()
	return d.faultMsg != ""
}

// raiseIntegrity raises the integrity action alarm for the fault found.
func (d *Daemon) raiseIntegrity() {
	d.faultMu.Lock()
	msg := d.faultMsg
	d.faultMu.Unlock()
	if msg == "" {
		return
	}
	at := d.now()
	d.alarms.enqueue(d.bg, func(ctx context.Context) {
		if err := d.alarms.judge.ObserveIntegrity(ctx, true, msg, at); err != nil {
			d.log.Error("the integrity alarm could not be recorded in the damaged store; it is shown and sent without its record", "err", err)
			d.alarms.raiseUnjournaled(ctx, msg, at, d.log)
		}
	})
}

var _ alerts.AlarmLister = (*alarmService)(nil)

// withUnjournaled adds the integrity alarm the store could not take.
func (s *alarmService) withUnjournaled(as []alerts.Alarm) []alerts.Alarm {
	if a := s.unjournaled.Load(); a != nil {
		return append(as, *a)
	}
	return as
}

// raiseUnjournaled is the integrity alarm of a store too damaged to
// journal it: it cannot wait in the outbox, so it is shown at once (the
// alarms route, the metrics) and sent to every notifier directly, each
// tried a few times. A person must not learn of the damage only from the
// log.
func (s *alarmService) raiseUnjournaled(ctx context.Context, msg string, at time.Time, log *slog.Logger) {
	if s.unjournaled.Load() != nil {
		return
	}
	id := "integrity:unrecorded:" + at.UTC().Format("20060102T150405.000000000Z")
	a := alerts.Alarm{ID: id, Kind: alerts.KindIntegrity, Level: alerts.LevelAction, State: alerts.StateActive,
		Since: at, ActiveSince: &at, Latched: true,
		Message: msg + " (this alarm is not in the store's journal: the store could not take it)"}
	s.unjournaled.Store(&a)
	tr := alerts.Transition{Key: id + "/1/active", AlarmID: id, Time: at, To: alerts.StateActive, Alarm: a}
	for _, n := range s.notifiers.All {
		go func() {
			wait := time.Second
			for try := 1; try <= 6; try++ {
				err := n.Notify(ctx, tr)
				if err == nil {
					return
				}
				log.Warn("integrity alarm not delivered", "notifier", n.Name(), "try", try, "err", err)
				select {
				case <-ctx.Done():
					return
				case <-time.After(wait):
				}
				wait *= 2
			}
		}()
	}
}

// startChecks raises the alarm of a fault found at start, and runs the
// full check (now, then every audit.full_check_every) and the publication
// of checkpoints (every audit.checkpoint_every) in the background.
func (d *Daemon) startChecks() error {
	d.raiseIntegrity()
	ctx, cancel := context.WithCancel(d.bg)
	var wg sync.WaitGroup
	d.push(func() error { cancel(); wg.Wait(); return nil })
	wg.Add(2)
	go func() {
		defer wg.Done()
		every(ctx, d.cfg.Audit.FullCheckPeriod(), true, func() {
			if err := d.st.CheckFull(ctx, store.CheckOptions{Keys: d.keys}); err != nil && ctx.Err() == nil {
				d.integrityFault(err)
			} else if err == nil {
				d.log.Info("store integrity: the full check found no fault")
			}
		})
	}()
	go func() {
		defer wg.Done()
		every(ctx, d.cfg.Audit.CheckpointPeriod(), true, func() { d.publishCheckpoint(ctx) })
	}()
	return nil
}

// publishCheckpoint writes the chain head to the log and to every
// notifier that carries checkpoints.
func (d *Daemon) publishCheckpoint(ctx context.Context) {
	cp, err := d.st.Checkpoint()
	if err != nil {
		if ctx.Err() == nil {
			d.log.Error("audit checkpoint not taken", "err", err)
		}
		return
	}
	line := cp.String()
	d.log.Info("audit checkpoint: keep it off this machine (cleanmon verify --head FILE)", "checkpoint", line)
	if err := alerts.PublishCheckpoint(ctx, d.alarms.notifiers.Checkpoints, alerts.AuditCheckpoint{Seq: cp.Seq, Time: cp.Time, Line: line}); err != nil && ctx.Err() == nil {
		d.log.Warn("audit checkpoint not delivered", "err", err)
	}
}

// every runs f (at once when now) and then every period until ctx ends.
func every(ctx context.Context, period time.Duration, now bool, f func()) {
	if now {
		f()
	}
	t := time.NewTicker(period)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			f()
		}
	}
}

// auditKeys are the public keys the checks verify signatures with.
type auditKeys = []ed25519.PublicKey

package collector

import (
	"context"
	"fmt"
	"io"
	"time"
)

// EnvironmentSink is what environment ingest needs from storage: it
// returns only once the samples are durable. A sample with the same
// sensor and time as one stored is a duplicate, counted and not stored
// again.
type EnvironmentSink interface {
	// CommitEnvironment says per sample whether this call stored it.
	CommitEnvironment(ctx context.Context, es []Environment) (stored []bool, err error)
}

// EnvironmentSubmitter takes environment samples in their submitted form
// and returns once they are durable (or refused: an *InputError); an
// [*EnvironmentIngest] is one. The Modbus poller, the simulator and the
// MQTT source feed it.
type EnvironmentSubmitter interface {
	SubmitEnvironment(ctx context.Context, raws []RawEnvironment) (Result, error)
}

// EnvironmentIngest validates temperature, humidity and airflow-velocity
// samples and commits them to an [EnvironmentSink], under the rules of
// readings and DP samples: all or nothing, an error naming element and
// field, an answer only after the durable commit. Set its observers
// before serving; then it is safe for concurrent use.
type EnvironmentIngest struct {
	reg      *Registry
	sink     EnvironmentSink
	opt      IngestOptions
	onEnv    []func([]Environment)
	onReject []func(Rejection)
	pooled   markFunc[Environment] // Pooled's commit: the coalescer's, or the sink's
}

// NewEnvironmentIngest returns an environment ingest over the registry
// (its environment sensors and physical bounds, see
// [Registry.WithEnvironment]) and the sink. Of opt, MaxBodyBytes,
// MaxFuture, Retention, Now and Coalesce apply, with the defaults of [NewIngest].
func NewEnvironmentIngest(reg *Registry, sink EnvironmentSink, opt IngestOptions) *EnvironmentIngest {
	if opt.MaxBodyBytes <= 0 {
		opt.MaxBodyBytes = DefaultMaxBodyBytes
	}
	if opt.MaxFuture <= 0 {
		opt.MaxFuture = DefaultMaxFuture
	}
	if opt.Now == nil {
		opt.Now = time.Now
	}
	in := &EnvironmentIngest{reg: reg, sink: sink, opt: opt, pooled: sink.CommitEnvironment}
	if opt.Coalesce > 0 {
		in.pooled = newCoalescer(opt.Coalesce, environmentKey, sink.CommitEnvironment).mark
	}
	return in
}

// OnEnvironment registers f to run after every durable commit, with the
// samples it stored (no duplicate).
// Observers run before the sender is answered: keep them quick, and do
// not modify the samples.
func (in *EnvironmentIngest) OnEnvironment(f func([]Environment)) { in.onEnv = append(in.onEnv, f) }

// OnRejected registers f to run for every refused request; Kind is
// "environment".
func (in *EnvironmentIngest) OnRejected(f func(Rejection)) { in.onReject = append(in.onReject, f) }

func (in *EnvironmentIngest) validator() validator {
	now := in.opt.Now().UTC()
	b := in.reg.bounds.withDefaults()
	v := validator{reg: in.reg, b: b, now: now, oldest: b.Oldest, skew: in.opt.MaxFuture, volTol: -1}
	if in.opt.Retention > 0 {
		if r := now.Add(-in.opt.Retention); r.After(v.oldest) {
			v.oldest, v.retain = r, true
		}
	}
	return v
}

// SubmitEnvironment validates raws and commits them, as a POST of the same
// array would. The error is an *InputError (nothing committed) or wraps
// ErrCommit.
func (in *EnvironmentIngest) SubmitEnvironment(ctx context.Context, raws []RawEnvironment) (Result, error) {
	return in.submitVia(ctx, raws, in.sink.CommitEnvironment)
}

// PooledEnvironment is an [EnvironmentIngest] whose submissions are
// committed together with the others arriving within
// [IngestOptions.Coalesce], as [PooledIngest] does for readings.
type PooledEnvironment struct{ in *EnvironmentIngest }

// Pooled returns the ingest's pooled view.
func (in *EnvironmentIngest) Pooled() PooledEnvironment { return PooledEnvironment{in} }

// SubmitEnvironment is [EnvironmentIngest.SubmitEnvironment], committed
// with the window's other submissions.
func (p PooledEnvironment) SubmitEnvironment(ctx context.Context, raws []RawEnvironment) (Result, error) {
	return p.in.submitVia(ctx, raws, p.in.pooled)
}

func (in *EnvironmentIngest) submitVia(ctx context.Context, raws []RawEnvironment, commit markFunc[Environment]) (Result, error) {
	v, b := in.validator(), in.reg.EnvironmentBounds()
	es := make([]Environment, len(raws))
	for i := range raws {
		if ie := v.environment(i, b, &raws[i], &es[i]); ie != nil {
			in.rejected(raws[i].Sensor, ie)
			return Result{}, ie
		}
	}
	return in.commit(ctx, es, commit)
}

// PostEnvironment takes the body of a request carrying environment
// samples (POST /api/v1/environment) under the rules of
// [Ingest.PostReadings]: a JSON object, a JSON array or NDJSON (an empty
// contentType is JSON), all or nothing, and an answer only once the
// accepted samples are durable. Errors: ErrContentType, an error wrapping
// ErrTooLarge, an *InputError naming the bad sample, or one wrapping
// ErrCommit.
func (in *EnvironmentIngest) PostEnvironment(ctx context.Context, contentType string, declaredLength int64, body io.Reader) (Result, error) {
	f, ok := formatOf(contentType)
	if !ok {
		in.rejected("", ErrContentType)
		return Result{}, ErrContentType
	}
	if declaredLength > in.opt.MaxBodyBytes {
		err := fmt.Errorf("%w: %d bytes declared, the limit is %d", ErrTooLarge, declaredLength, in.opt.MaxBodyBytes)
		in.rejected("", err)
		return Result{}, err
	}
	lim := &limitReader{r: body, left: in.opt.MaxBodyBytes, limit: in.opt.MaxBodyBytes}
	es, lastID, err := in.decode(lim, f)
	if err != nil {
		in.rejected(lastID, err)
		return Result{}, err
	}
	return in.commit(ctx, es, in.sink.CommitEnvironment)
}

// decode reads and validates a whole body; on error it also returns the
// sensor id of the element at fault, when decoded that far.
func (in *EnvironmentIngest) decode(r io.Reader, f bodyFormat) ([]Environment, string, error) {
	v, b := in.validator(), in.reg.EnvironmentBounds()
	es := make([]Environment, 0, 16)
	lastID := ""
	_, err := decodeBody(r, f, int(in.opt.MaxBodyBytes)+1, func(i int, raw *RawEnvironment) *InputError {
		lastID = raw.Sensor
		es = append(es, Environment{})
		return v.environment(i, b, raw, &es[len(es)-1])
	})
	return es, lastID, err
}

// DecodeEnvironment reads a body of environment samples (a JSON object, a
// JSON array, or NDJSON when contentType says application/x-ndjson; an
// empty contentType is JSON) without validating them against a registry:
// an *InputError names the element and field of a malformed one. Unknown
// fields are refused. For gateways and tools that forward samples.
func DecodeEnvironment(r io.Reader, contentType string, maxLine int) ([]RawEnvironment, error) {
	f, ok := formatOf(contentType)
	if !ok {
		return nil, ErrContentType
	}
	var out []RawEnvironment
	_, err := decodeBody(r, f, maxLine, func(_ int, raw *RawEnvironment) *InputError {
		out = append(out, *raw) // no reference types inside: a copy is whole
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

func environmentKey(x *Environment) dupKey { return dupKey{x.Sensor, x.Time.UnixNano()} }

func (in *EnvironmentIngest) commit(ctx context.Context, es []Environment, commit markFunc[Environment]) (Result, error) {
	return commitMarked(ctx, es, environmentKey, commit, in.onEnv, func(err error) { in.rejected("", err) })
}

func (in *EnvironmentIngest) rejected(id string, err error) {
	for _, f := range in.onReject {
		f(Rejection{Kind: "environment", ID: id, Err: err})
	}
}

// Ingests joins the ingest of readings and DP samples with the ingest of
// environment samples, so that one value takes all three kinds: what the
// MQTT source and the Modbus poller are handed.
type Ingests struct {
	*Ingest
	Environment *EnvironmentIngest
}

// SubmitEnvironment passes raws to the environment ingest.
func (i Ingests) SubmitEnvironment(ctx context.Context, raws []RawEnvironment) (Result, error) {
	return i.Environment.SubmitEnvironment(ctx, raws)
}

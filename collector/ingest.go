package collector

import (
	"context"
	"fmt"
	"io"
	"time"
)

// Sink is what the ingest path needs from storage; the daemon passes an
// adapter over the store. Each call must return only once the data is
// durable. A reading with the same counter and time as one already stored
// (a sample with the same sensor and time) is counted as a duplicate and
// not stored again.
type Sink interface {
	// CommitReadings says per reading whether this call stored it
	// (stored[i] false: a duplicate), so the observers see only new
	// readings and a resent batch feeds no rule and no metric twice.
	CommitReadings(ctx context.Context, rs []Reading) (stored []bool, err error)
	CommitPressure(ctx context.Context, ps []Pressure) (stored []bool, err error)
}

// Result is the answer to an accepted request, also its JSON body.
type Result struct {
	Accepted   int `json:"accepted"`
	Duplicates int `json:"duplicates"`
}

// Defaults of IngestOptions.
const (
	DefaultMaxBodyBytes    = 8 << 20
	DefaultMaxFuture       = 5 * time.Minute
	DefaultVolumeTolerance = 0.1
)

// IngestOptions tunes an [Ingest]; zero fields take the defaults.
type IngestOptions struct {
	MaxBodyBytes    int64            // request body limit, default 8 MiB; beyond it 413
	MaxFuture       time.Duration    // how far ahead of Now a sample may be (clock skew), default 5m
	Retention       time.Duration    // samples older than Now-Retention are refused; 0 (or < 0) = no limit
	Now             func() time.Time // clock, default time.Now
	VolumeTolerance float64          // relative tolerance of volume_l against flow_lpm × sample_s / 60, default 0.1; < 0 turns the check off
	// Coalesce is the window of [Ingest.Pooled]: its submissions that
	// arrive within it are committed together. 0: Pooled commits each
	// alone.
	Coalesce time.Duration
}

// Ingest validates incoming readings and DP samples and commits them to a
// [Sink]. HTTP requests and programmatic submissions go through the same
// validation and the same sink. It is safe for concurrent use once its
// observers are set.
type Ingest struct {
	reg      *Registry
	sink     Sink
	opt      IngestOptions
	onRead   []func([]Reading)
	onPress  []func([]Pressure)
	onReject []func(Rejection)
	// pooledReadings and pooledPressure commit the submissions of
	// Pooled: through a coalescer when opt.Coalesce is set, else straight
	// to the sink.
	pooledReadings markFunc[Reading]
	pooledPressure markFunc[Pressure]
}

// PooledIngest is an [Ingest] whose submissions are committed together
// with the others that arrive within [IngestOptions.Coalesce]: what many
// independent, small submitters should use, such as the Modbus poller's
// one goroutine per device. The store writes an audit entry (about 180
// bytes, kept) and a head record per commit; at one commit per sample, a
// DP sensor polled every 10 s would add some 560 MB a year of audit
// entries to a store that keeps the sample itself in about a byte. Each
// caller still returns only once its samples are durable (up to the
// window later), gets the answer for its own samples, and is refused
// alone when its input is invalid. A single submitter that waits for each
// answer before the next gains nothing from it and would only wait: it
// should use the Ingest itself.
type PooledIngest struct{ in *Ingest }

// Pooled returns the ingest's pooled view.
func (in *Ingest) Pooled() PooledIngest { return PooledIngest{in} }

// SubmitReadings is [Ingest.SubmitReadings], committed with the window's
// other submissions.
func (p PooledIngest) SubmitReadings(ctx context.Context, raws []RawReading) (Result, error) {
	return p.in.submitReadingsVia(ctx, raws, p.in.pooledReadings)
}

// SubmitPressure is [Ingest.SubmitPressure], committed with the window's
// other submissions.
func (p PooledIngest) SubmitPressure(ctx context.Context, raws []RawPressure) (Result, error) {
	return p.in.submitPressureVia(ctx, raws, p.in.pooledPressure)
}

// Rejection describes a refused request, for metrics and logs.
type Rejection struct {
	Kind string // "readings" or "pressure"
	// ID is the counter or sensor of the offending element when it was
	// decoded far enough to tell ("" otherwise; it may be an unknown id).
	ID  string
	Err error // an *InputError, or an error wrapping ErrTooLarge or ErrCommit
}

// NewIngest returns an ingest over the registry and the sink.
func NewIngest(reg *Registry, sink Sink, opt IngestOptions) *Ingest {
	if opt.MaxBodyBytes <= 0 {
		opt.MaxBodyBytes = DefaultMaxBodyBytes
	}
	if opt.MaxFuture <= 0 {
		opt.MaxFuture = DefaultMaxFuture
	}
	if opt.Now == nil {
		opt.Now = time.Now
	}
	if opt.VolumeTolerance == 0 {
		opt.VolumeTolerance = DefaultVolumeTolerance
	}
	in := &Ingest{reg: reg, sink: sink, opt: opt, pooledReadings: sink.CommitReadings, pooledPressure: sink.CommitPressure}
	if opt.Coalesce > 0 {
		in.pooledReadings = newCoalescer(opt.Coalesce, readingKey, sink.CommitReadings).mark
		in.pooledPressure = newCoalescer(opt.Coalesce, pressureKey, sink.CommitPressure).mark
	}
	return in
}

// OnReadings registers f to run after every durable commit of readings
// (the alarm engine and the live zone state subscribe). f gets the
// readings the commit stored, in the order sent: no duplicate, whether
// repeated within the request or of a stored reading. Observers run in
// the submitting goroutine before the sender is answered, so they must be
// quick, and must not modify the readings.
// Register observers before serving.
func (in *Ingest) OnReadings(f func([]Reading)) { in.onRead = append(in.onRead, f) }

// OnPressure registers f to run after every durable commit of DP samples,
// under the same rules as OnReadings.
func (in *Ingest) OnPressure(f func([]Pressure)) { in.onPress = append(in.onPress, f) }

// OnRejected registers f to run for every refused request (bad input, too
// large, sink failure). Register before serving.
func (in *Ingest) OnRejected(f func(Rejection)) { in.onReject = append(in.onReject, f) }

// Registry returns the registry the ingest validates against.
func (in *Ingest) Registry() *Registry { return in.reg }

// SubmitReadings validates raws and commits them, exactly as a POST of the
// same array would. The error is an *InputError (nothing committed) or
// wraps ErrCommit.
func (in *Ingest) SubmitReadings(ctx context.Context, raws []RawReading) (Result, error) {
	return in.submitReadingsVia(ctx, raws, in.sink.CommitReadings)
}

func (in *Ingest) submitReadingsVia(ctx context.Context, raws []RawReading, commit markFunc[Reading]) (Result, error) {
	v := in.validator()
	rs := make([]Reading, len(raws))
	for i := range raws {
		if ie := v.reading(i, &raws[i], &rs[i]); ie != nil {
			in.rejected("readings", raws[i].Counter, ie)
			return Result{}, ie
		}
	}
	return in.commitReadings(ctx, rs, commit)
}

// SubmitPressure validates raws and commits them, exactly as a POST of the
// same array would. The error is an *InputError (nothing committed) or
// wraps ErrCommit.
func (in *Ingest) SubmitPressure(ctx context.Context, raws []RawPressure) (Result, error) {
	return in.submitPressureVia(ctx, raws, in.sink.CommitPressure)
}

func (in *Ingest) submitPressureVia(ctx context.Context, raws []RawPressure, commit markFunc[Pressure]) (Result, error) {
	v := in.validator()
	ps := make([]Pressure, len(raws))
	for i := range raws {
		if ie := v.pressure(i, &raws[i], &ps[i]); ie != nil {
			in.rejected("pressure", raws[i].Sensor, ie)
			return Result{}, ie
		}
	}
	return in.commitPressure(ctx, ps, commit)
}

// PostReadings takes the body of a request carrying readings: a JSON
// object, a JSON array or NDJSON (contentType application/x-ndjson),
// declaredLength bytes long by its header (-1 when unknown). Nothing is
// stored unless every reading is valid, and it returns once the accepted
// ones are durable. Errors: ErrContentType, an error wrapping ErrTooLarge,
// an *InputError naming the bad reading, or one wrapping ErrCommit.
func (in *Ingest) PostReadings(ctx context.Context, contentType string, declaredLength int64, body io.Reader) (Result, error) {
	f, err := in.precheck(contentType, declaredLength, "readings")
	if err != nil {
		return Result{}, err
	}
	v := in.validator()
	rs := make([]Reading, 0, 64)
	lastID := ""
	_, err = decodeBody(in.limit(body), f, int(in.opt.MaxBodyBytes)+1,
		func(i int, raw *RawReading) *InputError {
			lastID = raw.Counter
			rs = append(rs, Reading{})
			return v.reading(i, raw, &rs[len(rs)-1])
		})
	if err != nil {
		in.rejected("readings", lastID, err)
		return Result{}, err
	}
	return in.commitReadings(ctx, rs, in.sink.CommitReadings)
}

// PostPressure takes a request body of DP samples under the same rules as
// PostReadings.
func (in *Ingest) PostPressure(ctx context.Context, contentType string, declaredLength int64, body io.Reader) (Result, error) {
	f, err := in.precheck(contentType, declaredLength, "pressure")
	if err != nil {
		return Result{}, err
	}
	v := in.validator()
	ps := make([]Pressure, 0, 64)
	lastID := ""
	_, err = decodeBody(in.limit(body), f, int(in.opt.MaxBodyBytes)+1,
		func(i int, raw *RawPressure) *InputError {
			lastID = raw.Sensor
			ps = append(ps, Pressure{})
			return v.pressure(i, raw, &ps[len(ps)-1])
		})
	if err != nil {
		in.rejected("pressure", lastID, err)
		return Result{}, err
	}
	return in.commitPressure(ctx, ps, in.sink.CommitPressure)
}

// precheck refuses what can be refused before the body is read.
func (in *Ingest) precheck(contentType string, declaredLength int64, kind string) (bodyFormat, error) {
	f, ok := formatOf(contentType)
	if !ok {
		in.rejected(kind, "", ErrContentType)
		return 0, ErrContentType
	}
	if declaredLength > in.opt.MaxBodyBytes {
		err := fmt.Errorf("%w: %d bytes declared, the limit is %d", ErrTooLarge, declaredLength, in.opt.MaxBodyBytes)
		in.rejected(kind, "", err)
		return 0, err
	}
	return f, nil
}

// limit bounds a body at MaxBodyBytes: reading past it fails with a
// *limitError, which the decoders turn into ErrTooLarge.
func (in *Ingest) limit(r io.Reader) io.Reader {
	return &limitReader{r: r, left: in.opt.MaxBodyBytes, limit: in.opt.MaxBodyBytes}
}

// limitReader is io.LimitReader that fails, rather than ends, at the limit,
// so that a cut-off body is not mistaken for a complete one.
type limitReader struct {
	r           io.Reader
	left, limit int64
}

// limitError is the failure of a body past the limit.
type limitError struct{ Limit int64 }

func (e *limitError) Error() string { return fmt.Sprintf("request body larger than %d bytes", e.Limit) }

func (l *limitReader) Read(p []byte) (int, error) {
	if l.left <= 0 {
		// One byte more tells a body of exactly the limit from a longer one.
		var one [1]byte
		n, err := l.r.Read(one[:])
		if n > 0 {
			return 0, &limitError{l.limit}
		}
		if err == nil {
			err = io.ErrNoProgress
		}
		return 0, err
	}
	if int64(len(p)) > l.left {
		p = p[:l.left]
	}
	n, err := l.r.Read(p)
	l.left -= int64(n)
	return n, err
}

// dupKey identifies a sample: one per instrument and instant.
type dupKey struct {
	id string
	t  int64
}

// dropRepeats keeps the first of each series and time in xs, in order,
// and counts the others: a batch that repeats a sample stores it once and
// answers the rest as duplicates.
func dropRepeats[T any](xs []T, key func(*T) dupKey) ([]T, int) {
	if len(xs) < 2 {
		return xs, 0
	}
	seen := make(map[dupKey]struct{}, len(xs))
	out, dups := xs[:0:0], 0
	for i := range xs {
		k := key(&xs[i])
		if _, dup := seen[k]; dup {
			dups++
			continue
		}
		seen[k] = struct{}{}
		out = append(out, xs[i])
	}
	return out, dups
}

func readingKey(x *Reading) dupKey   { return dupKey{x.Counter, x.Time.UnixNano()} }
func pressureKey(x *Pressure) dupKey { return dupKey{x.Sensor, x.Time.UnixNano()} }

// commitReadings commits rs through commit: the sink itself for a request,
// the coalescer for a submission when there is one.
func (in *Ingest) commitReadings(ctx context.Context, rs []Reading, commit markFunc[Reading]) (Result, error) {
	return commitMarked(ctx, rs, readingKey, commit, in.onRead, func(err error) { in.rejected("readings", "", err) })
}

func (in *Ingest) commitPressure(ctx context.Context, ps []Pressure, commit markFunc[Pressure]) (Result, error) {
	return commitMarked(ctx, ps, pressureKey, commit, in.onPress, func(err error) { in.rejected("pressure", "", err) })
}

func (in *Ingest) rejected(kind, id string, err error) {
	for _, f := range in.onReject {
		f(Rejection{Kind: kind, ID: id, Err: err})
	}
}

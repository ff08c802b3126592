package collector

import (
	"errors"
	"fmt"
)

// Errors returned by the package; detail is wrapped around them with %w.
var (
	// ErrConfig reports a counter or sensor configuration that cannot be used.
	ErrConfig = errors.New("collector: invalid configuration")
	// ErrInput is what every [*InputError] unwraps to.
	ErrInput = errors.New("collector: invalid input")
	// ErrTooLarge reports a request body beyond IngestOptions.MaxBodyBytes.
	ErrTooLarge = errors.New("collector: request body too large")
	// ErrContentType refuses a body in a format the ingest path does not
	// read (it reads application/json and application/x-ndjson).
	ErrContentType = errors.New("unsupported Content-Type: use application/json or application/x-ndjson")
	// ErrCommit wraps a failure of the [Sink]: nothing of the request may be
	// assumed stored, and the sender should retry later.
	ErrCommit = errors.New("collector: commit failed")
	// ErrSimulator reports a simulator set-up that cannot run, or a submit
	// that failed while it ran.
	ErrSimulator = errors.New("collector: simulator")
)

// FieldError names the configuration path of a bad value (for example
// "counters[2].flow_lpm") so that the config loader can map it to a YAML
// line and column.
type FieldError struct {
	Path string // e.g. "counters[2].sizes[1]"
	Msg  string // what is wrong, for a person
}

// Error implements error.
func (e FieldError) Error() string { return e.Path + ": " + e.Msg }

// InputError is a rejected request element. The whole request it came in is
// refused.
type InputError struct {
	// Index of the offending element: 0 for a single object, the position
	// in the array, or the element's index among the non-blank NDJSON lines.
	// A fault after the last element (junk after the array) names the last
	// element; a fault before the first names 0.
	Index int
	// Field is the JSON field name ("time", "volume_l", "counts.0.5"), or
	// "" when the element as a whole is at fault (malformed JSON).
	Field string
	// Msg says what is wrong.
	Msg string
	// Line is the 1-based line number in an NDJSON body, 0 otherwise.
	Line int
	// Rule names the rule the element broke (one of the Rule constants),
	// so that a sender, a log and a test can tell refusals apart without
	// parsing Msg.
	Rule string
}

// Error implements error; the text names the element and the field.
func (e *InputError) Error() string {
	where := fmt.Sprintf("element %d", e.Index)
	if e.Line > 0 {
		where += fmt.Sprintf(" (line %d)", e.Line)
	}
	rule := ""
	if e.Rule != "" {
		rule = " [rule " + e.Rule + "]"
	}
	if e.Field == "" {
		return where + ": " + e.Msg + rule
	}
	return where + ", " + e.Field + ": " + e.Msg + rule
}

// Unwrap makes every InputError match [ErrInput] with errors.Is.
func (e *InputError) Unwrap() error { return ErrInput }

func inputErrRule(i int, field, rule, format string, args ...any) *InputError {
	return &InputError{Index: i, Field: field, Rule: rule, Msg: fmt.Sprintf(format, args...)}
}

package collector

import (
	"fmt"
	"unicode"
	"unicode/utf8"
)

// Rules an element of a request can break; InputError.Rule holds one, so
// that a refusal says which rule it applied as well as the field.
const (
	RuleSyntax           = "json-syntax"           // not well-formed JSON, or not an object where one is needed
	RuleDuplicateKey     = "duplicate-key"         // a key appears twice in one object
	RuleCaseVariant      = "case-variant-key"      // a key matches a field only when case is ignored
	RuleUnknownKey       = "unknown-key"           // a key the element does not have
	RuleType             = "value-type"            // a value of the wrong kind, or a number out of range
	RuleRequired         = "required"              // a field that must be given is missing
	RuleUnknownID        = "unknown-instrument"    // the counter or sensor is not configured
	RuleText             = "plain-text"            // control characters, NUL, or too long
	RuleTimeFormat       = "time-format"           // not RFC 3339 with a zone
	RuleTimeFuture       = "time-clock-skew"       // later than now plus the allowed clock skew
	RuleTimeRetention    = "time-retention"        // older than the retention period
	RuleTimeOldest       = "time-oldest"           // before the oldest plausible sample time
	RuleEnum             = "allowed-values"        // mode or status not one of the allowed words
	RuleVolumePositive   = "volume-positive"       // volume not a finite number > 0
	RuleFlowRange        = "flow-range"            // reported flow negative or beyond what the counter can draw
	RuleSampleTime       = "sample-time-range"     // sampling time negative or longer than the counter's period
	RuleVolumeConsistent = "volume-flow-time"      // volume disagrees with the reported flow × sampling time
	RuleVolumeDrawable   = "volume-drawable"       // volume beyond what the counter's flow can draw in its sample time
	RuleCount            = "count-value"           // a count that is not a whole number 0…2^53
	RuleChannel          = "count-channel"         // a channel the counter does not have, given twice, or missing
	RuleCumulativeOrder  = "cumulative-order"      // a larger size counts more than a smaller one
	RuleConcentrationMax = "concentration-maximum" // beyond the counter's maximum × the margin
	RulePressureRange    = "pressure-range"        // DP beyond the physical bound
	RulePressureFinite   = "pressure-finite"       // DP not a finite number
	// RuleEnvironmentRange: a temperature, humidity or velocity beyond its
	// physical range (EnvironmentBounds), or not finite.
	RuleEnvironmentRange = "environment-range"
	// RuleEnvironmentChannel: a channel the sensor's kind does not report.
	RuleEnvironmentChannel = "environment-channel"
	// RuleTopicInstrument: an MQTT payload names another instrument than
	// its topic carries.
	RuleTopicInstrument = "topic-instrument"
	// RuleTooLarge: an MQTT payload beyond the size limit.
	RuleTooLarge   = "too-large"
	maxFreeTextLen = 4096 // bytes of a comment or a reason
)

// NewInputError builds the refusal of element index: field names the
// JSON field ("pa", "counts.0.5"), rule one of the Rule constants.
func NewInputError(index int, field, rule, format string, args ...any) *InputError {
	return inputErrRule(index, field, rule, format, args...)
}

// TextProblem says what makes s unfit as stored text ("" when it is
// fine): invalid UTF-8, NUL or another control character (tab, CR and LF
// included: one value is one line in the record and in a log), or more
// than maxLen bytes (maxLen ≤ 0: 4096).
func TextProblem(s string, maxLen int) string {
	if maxLen <= 0 {
		maxLen = maxFreeTextLen
	}
	if len(s) > maxLen {
		return fmt.Sprintf("%d bytes, more than the %d allowed", len(s), maxLen)
	}
	for i, r := range s {
		switch {
		case r == utf8.RuneError && !validAt(s, i):
			return fmt.Sprintf("invalid UTF-8 at byte %d", i)
		case r == 0:
			return fmt.Sprintf("a NUL character at byte %d", i)
		case unicode.IsControl(r) || r == '\u2028' || r == '\u2029':
			return fmt.Sprintf("control character U+%04X at byte %d", r, i)
		}
	}
	return ""
}

func validAt(s string, i int) bool {
	r, n := utf8.DecodeRuneInString(s[i:])
	return !(r == utf8.RuneError && n <= 1)
}

// CheckText refuses free text (a comment, a reason, an id) that
// TextProblem finds unfit, naming element index and field.
func CheckText(index int, field, s string, maxLen int) *InputError {
	if p := TextProblem(s, maxLen); p != "" {
		return inputErrRule(index, field, RuleText, "%s: only printable text is stored", p)
	}
	return nil
}

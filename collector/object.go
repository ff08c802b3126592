package collector

import "slices"

// DecodeObject decodes one small JSON object (a state change, an
// acknowledgement, an account change) under the ingest's strict rules — a
// key given twice, in another case, or unknown is refused with its name,
// and no message carries a name of the program's own types — then checks
// the free-text fields texts returns (field name → value after decoding)
// with CheckText. Both the API and the pages decode their request bodies
// through it, so the two answer a bad body alike.
func DecodeObject(data []byte, v any, texts func() map[string]string, maxText int) *InputError {
	if len(data) == 0 {
		return NewInputError(0, "", RuleSyntax, "empty body: want a JSON object")
	}
	if ie := StrictUnmarshal(data, v, 0); ie != nil {
		return ie
	}
	if texts == nil {
		return nil
	}
	fields := texts()
	names := make([]string, 0, len(fields))
	for k := range fields {
		names = append(names, k)
	}
	slices.Sort(names)
	for _, name := range names {
		if ie := CheckText(0, name, fields[name], maxText); ie != nil {
			return ie
		}
	}
	return nil
}

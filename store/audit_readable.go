package store

import (
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"strings"
	"unicode"
	"unicode/utf8"
)

// AuditDetail is an audit entry's Detail decoded for people: the store's
// own binary encodings as "key: value" lines, and the names of the series
// (counters, sensors, zones) a batch entry covers, so a reader can filter
// the trail by what it touched.
type AuditDetail struct {
	Text  string   // readable, one "key: value" a line
	Names []string // series covered (batch entries); nil for others
}

// ReadableDetail decodes e.Detail. Text is kept as it is; the encodings of
// the store's own entries are spelt out; anything else is shown as hex with
// a note, never dropped.
func ReadableDetail(e AuditEntry) AuditDetail {
	if len(e.Detail) == 0 {
		return AuditDetail{}
	}
	switch e.Action {
	case AuditReadings, AuditPressure, AuditOpState, AuditAlarm:
		if c, err := decodeCoverage(e.Detail); err == nil {
			return coverageText(c)
		}
	case AuditChainStart:
		if series, horizon, err := decodeChainStart(e.Detail); err == nil {
			lines := []string{fmt.Sprintf("series held before the chain: %d", len(series))}
			for _, s := range series {
				lines = append(lines, fmt.Sprintf("%s %s: %d records, newest %s", kindWord(s.kind), s.name, s.count, nsTime(s.last).Format("2006-01-02T15:04:05.999999999Z07:00")))
			}
			if horizon != 0 {
				lines = append(lines, "swept before: "+nsTime(horizon).Format("2006-01-02T15:04:05Z07:00"))
			}
			return AuditDetail{Text: strings.Join(lines, "\n")}
		}
	case AuditSweep:
		if len(e.Detail) > 8 {
			d := decoder{b: e.Detail[8:]}
			n := [4]uint64{d.uvarint("readings"), d.uvarint("pressure"), d.uvarint("rollups"), d.uvarint("alarms")}
			if d.err == nil {
				return AuditDetail{Text: fmt.Sprintf("horizon: %s\nreadings deleted: %d\npressure samples deleted: %d\nrollups deleted: %d\ncleared alarms deleted: %d",
					nsTime(int64(binary.BigEndian.Uint64(e.Detail))).Format("2006-01-02T15:04:05Z07:00"), n[0], n[1], n[2], n[3])}
			}
		}
	case AuditKeyChange:
		if d := e.Detail; len(d) == 1+8+32+8 {
			return AuditDetail{Text: fmt.Sprintf("version: %d\nnew key id: %s\npublic key: %s\nprevious key id: %s",
				d[0], hex.EncodeToString(d[1:9]), hex.EncodeToString(d[9:41]), hex.EncodeToString(d[41:49]))}
		}
	case AuditUncleanStop:
		if d := e.Detail; len(d) == 8+32+8 {
			opened := "unknown"
			if ns := int64(binary.BigEndian.Uint64(d[40:])); ns != 0 {
				opened = nsTime(ns).Format("2006-01-02T15:04:05.999999999Z07:00")
			}
			return AuditDetail{Text: fmt.Sprintf("last entry before: #%d\nits hash: %s\nthe unclosed run opened the store at: %s",
				binary.BigEndian.Uint64(d), hex.EncodeToString(d[8:40]), opened)}
		}
	case AuditBackup:
		d := decoder{b: e.Detail}
		n := d.uvarint("bytes")
		if d.err == nil && len(d.b) == 8+32 {
			return AuditDetail{Text: fmt.Sprintf("bytes: %d\ncopy's audit head: #%d\ncopy's audit hash: %s", n, binary.BigEndian.Uint64(d.b), hex.EncodeToString(d.b[8:]))}
		}
	}
	if isText(e.Detail) {
		return AuditDetail{Text: string(e.Detail)}
	}
	return AuditDetail{Text: "binary detail (hex): " + hex.EncodeToString(e.Detail)}
}

func coverageText(c covered) AuditDetail {
	counts := make([]int, len(c.names))
	for _, r := range c.recs {
		counts[r.name]++
	}
	lines := []string{fmt.Sprintf("records: %d", len(c.recs))}
	for i, n := range c.names {
		if n == "" {
			n = "(journal)"
		}
		lines = append(lines, fmt.Sprintf("%s %s: %d", kindWord(c.kind), n, counts[i]))
	}
	lines = append(lines, "records' SHA-256: "+hex.EncodeToString(c.digest[:]))
	names := make([]string, 0, len(c.names))
	for _, n := range c.names {
		if n != "" {
			names = append(names, n)
		}
	}
	return AuditDetail{Text: strings.Join(lines, "\n"), Names: names}
}

func kindWord(kind byte) string {
	switch kind {
	case coverReadings:
		return "counter"
	case coverPressure:
		return "sensor"
	case coverOpState:
		return "zone"
	case coverJournal:
		return "alarm journal"
	}
	return "series"
}

func isText(b []byte) bool {
	if !utf8.Valid(b) {
		return false
	}
	for _, r := range string(b) {
		if !unicode.IsPrint(r) && r != '\n' && r != '\t' {
			return false
		}
	}
	return true
}

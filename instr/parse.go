package instr

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// SCPI-1999 vol. 1 §7.2.1 (memory): 9.91E37 stands for not-a-number and
// ±9.9E37 for ±infinity in numeric replies.
const (
	scpiNaN = 9.91e37
	scpiInf = 9.9e37
)

// ParseNumber parses a numeric reply: IEEE 488.2 NR1, NR2 or NR3
// (clause 8.7.2..8.7.4; memory), with surrounding spaces allowed, and
// SCPI's 9.91E37 as NaN and ±9.9E37 as ±Inf. A header echoed before the
// number ("TINT 1E-6", as with SYSTem:HEADer ON) is skipped.
func ParseNumber(s string) (float64, error) {
	t := strings.TrimSpace(s)
	if i := strings.LastIndexAny(t, " \t"); i >= 0 && i < len(t)-1 && isHeaderLike(t[:i]) {
		t = strings.TrimSpace(t[i+1:])
	}
	if t == "" {
		return 0, fmt.Errorf("numeric reply %q is empty", s)
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || strings.ContainsAny(t, "_xXpP") || strings.EqualFold(t, "nan") || strings.Contains(strings.ToLower(t), "inf") {
		return 0, fmt.Errorf("numeric reply %q is not a number", s)
	}
	switch v {
	case scpiNaN:
		return math.NaN(), nil
	case scpiInf:
		return math.Inf(1), nil
	case -scpiInf:
		return math.Inf(-1), nil
	}
	return v, nil
}

func isHeaderLike(h string) bool {
	h = strings.TrimSpace(h)
	if h == "" || !(h[0] == ':' || h[0] == '*' || h[0] >= 'A' && h[0] <= 'Z' || h[0] >= 'a' && h[0] <= 'z') {
		return false
	}
	for _, c := range h {
		if !(c == ':' || c == '*' || c == '?' || c >= 'A' && c <= 'Z' || c >= 'a' && c <= 'z' || c >= '0' && c <= '9') {
			return false
		}
	}
	return true
}

// ParseBool parses a boolean reply: "1", "0", "ON", "OFF" (IEEE 488.2
// returns NR1 for booleans; some instruments answer with the words).
func ParseBool(s string) (bool, error) {
	switch strings.ToUpper(strings.TrimSpace(s)) {
	case "1", "ON", "+1":
		return true, nil
	case "0", "OFF", "+0":
		return false, nil
	}
	return false, fmt.Errorf("boolean reply %q: want 1, 0, ON or OFF", s)
}

// ParseErrorReply parses a SYSTem:ERRor[:NEXT]? reply,
//
//	<code>,"<text>"
//
// (SCPI-1999 vol. 2 SYSTem:ERRor; memory) where the text is IEEE 488.2
// string response data, so an embedded quote is doubled (clause 8.7.8;
// memory). Code 0 means the queue is empty. A missing or unquoted text
// is accepted; a missing or non-integer code is an error.
func ParseErrorReply(s string) (code int, text string, err error) {
	t := strings.TrimSpace(s)
	num, rest, hasText := strings.Cut(t, ",")
	num = strings.TrimSpace(num)
	c, perr := strconv.Atoi(strings.TrimPrefix(num, "+"))
	if perr != nil || num == "" {
		return 0, "", fmt.Errorf("error-queue reply %q: code %q is not an integer", s, num)
	}
	if !hasText {
		return c, "", nil
	}
	rest = strings.TrimSpace(rest)
	if len(rest) >= 2 && rest[0] == '"' && rest[len(rest)-1] == '"' {
		rest = strings.ReplaceAll(rest[1:len(rest)-1], `""`, `"`)
	} else if len(rest) >= 1 && rest[0] == '"' {
		return 0, "", fmt.Errorf("error-queue reply %q: unterminated string", s)
	}
	return c, rest, nil
}

// ParseCSV parses comma-separated numbers into dst and returns how many
// it wrote; more values than len(dst) is an error.
func ParseCSV(s string, dst []float64) (int, error) {
	t := strings.TrimSpace(s)
	if t == "" {
		return 0, nil
	}
	n := 0
	for field := range strings.SplitSeq(t, ",") {
		if n >= len(dst) {
			return n, fmt.Errorf("csv reply: more than %d values", len(dst))
		}
		f := strings.TrimSpace(field)
		v, err := strconv.ParseFloat(f, 64)
		if err != nil {
			return n, fmt.Errorf("csv reply: value %d %q is not a number", n+1, f)
		}
		dst[n] = v
		n++
	}
	return n, nil
}

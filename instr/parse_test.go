package instr

import (
	"math"
	"strconv"
	"strings"
	"testing"
)

func TestParseNumber(t *testing.T) {
	// Forms of IEEE 488.2 NR1/NR2/NR3 numeric response data (clause
	// 8.7.2..8.7.4; memory) and SCPI's NaN and infinity codes (SCPI-1999
	// vol. 1 §7.2.1; memory).
	tests := []struct {
		in   string
		want float64
	}{
		{"1000", 1000},
		{"+1000", 1000},
		{"-12.5", -12.5},
		{"1.0E-06", 1e-6},
		{"+1.00000000E+03", 1000},
		{" 2.5e3 \r", 2500},
		{"TINT 1E-6", 1e-6},
		{":SENS:SWE:POIN 4096", 4096},
		{"9.9E37", math.Inf(1)},
		{"-9.9E37", math.Inf(-1)},
	}
	for _, tc := range tests {
		got, err := ParseNumber(tc.in)
		if err != nil || got != tc.want {
			t.Errorf("ParseNumber(%q) = %v, %v; want %v", tc.in, got, err, tc.want)
		}
	}
	if v, err := ParseNumber("9.91E37"); err != nil || !math.IsNaN(v) {
		t.Errorf("ParseNumber(9.91E37) = %v, %v; want NaN", v, err)
	}
	for _, bad := range []string{"", "abc", "1,2", "NaN", "Inf", "0x10", "1_000", "1.0.0", "1 2"} {
		if _, err := ParseNumber(bad); err == nil || !strings.Contains(err.Error(), "numeric reply") {
			t.Errorf("ParseNumber(%q) error %v, want one naming the reply", bad, err)
		}
	}
}

func TestParseBool(t *testing.T) {
	for in, want := range map[string]bool{"1": true, "0": false, "ON": true, "off": false, " 1\r": true} {
		if got, err := ParseBool(in); err != nil || got != want {
			t.Errorf("ParseBool(%q) = %v, %v", in, got, err)
		}
	}
	if _, err := ParseBool("2"); err == nil {
		t.Error("ParseBool(2): no error")
	}
}

func TestParseErrorReply(t *testing.T) {
	// SYSTem:ERRor? replies in SCPI-1999 form (memory); doubled quotes
	// per IEEE 488.2 <STRING RESPONSE DATA>, clause 8.7.8 (memory).
	tests := []struct {
		in   string
		code int
		text string
	}{
		{`0,"No error"`, 0, "No error"},
		{`+0,"No error"`, 0, "No error"},
		{`-113,"Undefined header"`, -113, "Undefined header"},
		{`-222,"Data out of range;FREQ 1e9"`, -222, "Data out of range;FREQ 1e9"},
		{`-100 , "say ""hi"", twice"`, -100, `say "hi", twice`},
		{`201,unquoted text`, 201, "unquoted text"},
		{`-350`, -350, ""},
	}
	for _, tc := range tests {
		code, text, err := ParseErrorReply(tc.in)
		if err != nil || code != tc.code || text != tc.text {
			t.Errorf("ParseErrorReply(%q) = %d, %q, %v; want %d, %q", tc.in, code, text, err, tc.code, tc.text)
		}
	}
	for _, bad := range []string{"", `"No error"`, `x,"y"`, `-1,"open`} {
		if _, _, err := ParseErrorReply(bad); err == nil {
			t.Errorf("ParseErrorReply(%q): no error", bad)
		}
	}
}

func TestParseCSV(t *testing.T) {
	dst := make([]float64, 4)
	n, err := ParseCSV(" 1, -2.5e-3,+3 ,4\n", dst)
	if err != nil || n != 4 || dst[0] != 1 || dst[1] != -2.5e-3 || dst[2] != 3 || dst[3] != 4 {
		t.Fatalf("ParseCSV = %d %v %v", n, dst, err)
	}
	if _, err := ParseCSV("1,2,3,4,5", dst); err == nil {
		t.Error("too many values: no error")
	}
	if _, err := ParseCSV("1,,2", dst); err == nil {
		t.Error("empty value: no error")
	}
}

func FuzzParseNumber(f *testing.F) {
	for _, s := range []string{"1", "-1.5E+03", "TINT 1e-6", "9.91E37", "abc", " "} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		v, err := ParseNumber(s)
		if err != nil {
			return
		}
		// A finite number printed back parses to itself.
		if !math.IsNaN(v) && !math.IsInf(v, 0) {
			w, err := ParseNumber(formatG(v))
			if err != nil || w != v {
				t.Fatalf("%q -> %v -> %q -> %v, %v", s, v, formatG(v), w, err)
			}
		}
	})
}

func FuzzParseErrorReply(f *testing.F) {
	for _, s := range []string{`0,"No error"`, `-113,"Undefined header"`, `-100,"a ""b"""`, `5`, `x`} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		code, text, err := ParseErrorReply(s)
		if err != nil {
			return
		}
		// Re-quoting per IEEE 488.2 8.7.8 and parsing again is stable.
		q := `"` + strings.ReplaceAll(text, `"`, `""`) + `"`
		c2, t2, err := ParseErrorReply(itoaSigned(code) + "," + q)
		if err != nil || c2 != code || t2 != text {
			t.Fatalf("%q: %d %q; re-quoted gives %d %q %v", s, code, text, c2, t2, err)
		}
	})
}

func FuzzParseCSV(f *testing.F) {
	for _, s := range []string{"1,2,3", " 1e3 ,-4", "", ",", "a,b"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		dst := make([]float64, 8)
		n, err := ParseCSV(s, dst)
		if n < 0 || n > len(dst) {
			t.Fatalf("n = %d", n)
		}
		if err == nil && strings.TrimSpace(s) != "" && n != strings.Count(strings.TrimSpace(s), ",")+1 {
			t.Fatalf("%q: %d values for %d fields", s, n, strings.Count(s, ",")+1)
		}
	})
}

func formatG(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

func itoaSigned(n int) string { return strconv.Itoa(n) }

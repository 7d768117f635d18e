package main

import (
	"bytes"
	"crypto/sha256"
	"fmt"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Bad input across every command: each case must exit with status 2,
// say what is wrong naming the flag, file, line or key, and leave every
// file as it was (hashed before and after) with no new file anywhere in
// the input directory or the working directory.

// snapshotDir maps each regular file's name in dir to its SHA-256.
func snapshotDir(t *testing.T, dir string) map[string][32]byte {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	m := map[string][32]byte{}
	for _, e := range ents {
		if !e.Type().IsRegular() {
			continue
		}
		b, err := os.ReadFile(filepath.Join(dir, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		m[e.Name()] = sha256.Sum256(b)
	}
	return m
}

func diffSnapshots(before, after map[string][32]byte) []string {
	var d []string
	for n, h := range before {
		if h2, ok := after[n]; !ok {
			d = append(d, n+" removed")
		} else if h2 != h {
			d = append(d, n+" changed")
		}
	}
	for n := range after {
		if _, ok := before[n]; !ok {
			d = append(d, n+" created")
		}
	}
	return d
}

// insertAfter returns src with extra inserted as a new line after the
// first line starting with prefix, and the 1-based number of the
// inserted line.
func insertAfter(t *testing.T, src, prefix, extra string) (string, int) {
	t.Helper()
	lines := strings.Split(src, "\n")
	for i, l := range lines {
		if strings.HasPrefix(l, prefix) {
			out := append(append(append([]string{}, lines[:i+1]...), extra), lines[i+1:]...)
			return strings.Join(out, "\n"), i + 2
		}
	}
	t.Fatalf("no line starting with %q", prefix)
	return "", 0
}

func readRepoFile(t *testing.T, rel string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "..", rel))
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func TestBadInputEverywhere(t *testing.T) {
	dir := t.TempDir()
	write := func(name, content string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}

	// Profiles: an unknown key at a known line, a TOML syntax error, and
	// a digitizer profile where a generator profile belongs.
	genSrc, keyLine := insertAfter(t, readRepoFile(t, "testdata/profiles/template-generator.toml"), "max_vpp", "bogus_key = 3")
	badKey := write("badkey.toml", genSrc)
	badSyntax := write("syntax.toml", "kind = \"generator\"\nname = \"x\"\n[generator]\nfrequency = = 1\n")
	digProfile := write("dig.toml", readRepoFile(t, "testdata/profiles/template-digitizer.toml"))

	// Scenarios: an unknown key, a negative value, a syntax error on
	// line 3.
	scen := readRepoFile(t, "sim/scenarios/well-compensated.toml")
	scenKeySrc, _ := insertAfter(t, scen, "r2_ohm", "r9_ohm = 1")
	scenKey := write("scen-key.toml", scenKeySrc)
	scenNeg := write("scen-neg.toml", strings.Replace(scen, "esr_ohm = 0.010", "esr_ohm = -0.010", 1))
	scenSyntax := write("scen-syntax.toml", "name = \"x\"\n[power_stage]\nvin_v = = 12\n")

	// Sessions: not JSON, cut off, a schema from the future, a point with
	// a negative frequency.
	sess := readRepoFile(t, "testdata/sessions/minimal-fields.json")
	garbage := write("garbage.json", "not json\n")
	cut := sess[:300]
	cutLine := 1 + strings.Count(cut, "\n")
	cutCol := len(cut) - strings.LastIndex(cut, "\n")
	truncated := write("trunc.json", cut)
	if !strings.Contains(sess, `"schema": 1`) {
		t.Fatal("fixture minimal-fields.json lost its schema line")
	}
	future := write("schema.json", strings.Replace(sess, `"schema": 1`, `"schema": 99`, 1))
	first := strings.Index(sess, `"freq_hz"`)
	comma := first + strings.Index(sess[first:], ",")
	badPoint := write("badpoint.json", sess[:first]+`"freq_hz": -5`+sess[comma:])
	good := write("good.json", sess)

	// CSV: a bad number at line 3, column 5 (the "abc"), and a header
	// without the required columns.
	badNum := write("badnum.csv", "frequency_hz,gain_db,phase_deg\n100,20,-90\n200,abc,-95\n")
	badHdr := write("badhdr.csv", "f,g\n1,2\n")

	// A closed loopback port: nothing listens on it.
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	dead := l.Addr().String()
	l.Close()

	out := filepath.Join(dir, "new-session.json")
	png := filepath.Join(dir, "out.png")
	base := filepath.Base

	tests := []struct {
		name string
		args []string
		want []string // every one must appear in stderr
	}{
		// command lines
		{"unknown command", []string{"bogus"}, []string{`unknown command "bogus"`}},
		{"sweep unknown flag", []string{"sweep", "--nosuch"}, []string{"-nosuch"}},
		{"sweep bad int", []string{"sweep", "--sim", "--ppd", "x"}, []string{"-ppd"}},
		{"sweep bad duration", []string{"sweep", "--sim", "--timeout", "5"}, []string{"-timeout"}},
		{"sweep bad list entry", []string{"sweep", "--sim", "--freqs", "1k,abc,3k", "--out", out}, []string{"--freqs", `"abc"`}},
		{"sweep negative step", []string{"sweep", "--sim", "--step", "-5", "--out", out}, []string{"--step"}},
		{"sweep bad switching", []string{"sweep", "--sim", "--switching", "12q", "--out", out}, []string{"--switching", "12q"}},
		{"sweep amp above cap", []string{"sweep", "--sim", "--amp", "30", "--max-amp", "20", "--out", out}, []string{"--amp", "cap"}},
		{"sweep out exists", []string{"sweep", "--sim", "--out", good}, []string{"--out " + good}},
		{"sim negative fault", []string{"sim", "--reply-delay", "-1s"}, []string{"fault"}},
		{"sim extra argument", []string{"sim", "extra"}, []string{`"extra"`}},
		{"scenarios unknown flag", []string{"scenarios", "--bogus"}, []string{"-bogus"}},
		{"probe no address", []string{"probe"}, []string{"ADDRESS"}},
		{"probe bad kind", []string{"probe", dead, "--kind", "oven"}, []string{"--kind", "oven"}},
		{"probe bad range", []string{"probe", dead, "--kind", "digitizer", "--range", "abc"}, []string{"--range", "abc"}},
		{"probe two addresses", []string{"probe", "a", "b"}, []string{`"b"`}},
		{"analyze no file", []string{"analyze"}, []string{"FILE"}},
		{"analyze csv of two", []string{"analyze", "--csv", good, badNum}, []string{"--csv"}},
		{"plot no output", []string{"plot", good}, []string{"-o"}},
		{"plot unknown format", []string{"plot", good, "-o", filepath.Join(dir, "out.gif")}, []string{"-o", ".gif"}},
		{"plot output is an input", []string{"plot", good, "-o", good}, []string{good, "input"}},
		{"plot bad view", []string{"plot", good, "-o", png, "--view", "polar"}, []string{"--view", "polar"}},
		{"plot bad width", []string{"plot", good, "-o", png, "--width", "-1"}, []string{"--width"}},
		{"open no file", []string{"open"}, []string{"FILE"}},
		{"open two files", []string{"open", good, good}, []string{"FILE"}},

		// addresses
		{"sweep VISA resource", []string{"sweep", "--gen", "TCPIP::host::INSTR", "--dig", dead, "--out", out}, []string{"--gen TCPIP::host::INSTR", "SOCKET"}},
		{"sweep bad baud", []string{"sweep", "--gen", "serial:///dev/ttyUSB0?baud=fast", "--dig", dead, "--out", out}, []string{"--gen", "baud"}},
		{"sweep unknown scheme", []string{"sweep", "--gen", "ftp://x", "--dig", dead, "--out", out}, []string{"--gen ftp://x"}},
		{"sweep nothing listening", []string{"sweep", "--gen", dead, "--dig", dead, "--out", out}, []string{"--gen " + dead}},
		{"sim bad listen", []string{"sim", "--listen", "nonsense"}, []string{"--listen nonsense"}},
		{"probe unknown scheme", []string{"probe", "ftp://x"}, []string{"ftp"}},

		// profiles
		{"sweep profile unknown key", []string{"sweep", "--gen", dead, "--dig", dead, "--gen-profile", badKey, "--out", out},
			[]string{"--gen-profile", fmt.Sprintf("%s:%d", base(badKey), keyLine), "bogus_key"}},
		{"sweep profile syntax", []string{"sweep", "--gen", dead, "--dig", dead, "--gen-profile", badSyntax, "--out", out},
			[]string{"--gen-profile", base(badSyntax) + ":4"}},
		{"sweep profile wrong kind", []string{"sweep", "--gen", dead, "--dig", dead, "--gen-profile", digProfile, "--out", out},
			[]string{"--gen-profile", "digitizer profile"}},
		{"sweep dig profile unknown key", []string{"sweep", "--gen", dead, "--dig", dead, "--dig-profile", badKey, "--out", out},
			[]string{"--dig-profile", "bogus_key"}},
		{"probe profile unknown key", []string{"probe", dead, "--profile", badKey},
			[]string{"--profile", fmt.Sprintf("%s:%d", base(badKey), keyLine), "bogus_key"}},

		// scenario files
		{"sweep scenario unknown key", []string{"sweep", "--sim", "--scenario", scenKey, "--out", out}, []string{base(scenKey), "compensator.r9_ohm"}},
		{"sweep scenario negative", []string{"sweep", "--sim", "--scenario", scenNeg, "--out", out}, []string{base(scenNeg), "power_stage.esr_ohm"}},
		{"sweep unknown scenario", []string{"sweep", "--sim", "--scenario", "nosuch", "--out", out}, []string{`"nosuch"`}},
		{"sweep unknown load", []string{"sweep", "--sim", "--load", "nosuch", "--out", out}, []string{`"nosuch"`}},
		{"sim scenario syntax", []string{"sim", "--scenario", scenSyntax}, []string{"--scenario", base(scenSyntax), "line 3"}},
		{"sim scenario unknown key", []string{"sim", "--scenario", scenKey}, []string{"--scenario", "compensator.r9_ohm"}},
		{"sim unknown load", []string{"sim", "--load", "nosuch"}, []string{"--load", `"nosuch"`}},
		{"scenarios unknown key", []string{"scenarios", scenKey}, []string{base(scenKey), "compensator.r9_ohm"}},
		{"scenarios syntax", []string{"scenarios", scenSyntax}, []string{base(scenSyntax), "line 3"}},
		{"scenarios missing file", []string{"scenarios", filepath.Join(dir, "nosuch.toml")}, []string{"nosuch.toml"}},

		// session and data files
		{"resume garbage", []string{"sweep", "--sim", "--resume", garbage}, []string{"--resume " + garbage}},
		{"resume truncated", []string{"sweep", "--sim", "--resume", truncated}, []string{"--resume", fmt.Sprintf("%s:%d:%d", base(truncated), cutLine, cutCol)}},
		{"resume future schema", []string{"sweep", "--sim", "--resume", future}, []string{"--resume", base(future), "schema 99"}},
		{"resume bad point", []string{"sweep", "--sim", "--resume", badPoint}, []string{"--resume", base(badPoint), "point 1", "freq_hz"}},
		{"calibration garbage", []string{"sweep", "--sim", "--measure", "ratio", "--calibration", garbage, "--out", out}, []string{"--calibration", base(garbage)}},
		{"analyze garbage", []string{"analyze", garbage}, []string{base(garbage)}},
		{"analyze truncated", []string{"analyze", truncated}, []string{fmt.Sprintf("%s:%d:%d", base(truncated), cutLine, cutCol)}},
		{"analyze future schema", []string{"analyze", future}, []string{base(future), "schema 99"}},
		{"analyze bad point", []string{"analyze", badPoint}, []string{base(badPoint), "point 1", "freq_hz"}},
		{"analyze bad number", []string{"analyze", badNum}, []string{base(badNum) + ":3:5", "gain_db"}},
		{"analyze bad header", []string{"analyze", badHdr}, []string{base(badHdr) + ":1", "frequency_hz"}},
		{"analyze missing", []string{"analyze", filepath.Join(dir, "nosuch.json")}, []string{"nosuch.json"}},
		{"plot bad number", []string{"plot", badNum, "-o", png}, []string{base(badNum) + ":3:5", "gain_db"}},
		{"open garbage", []string{"open", garbage}, []string{base(garbage)}},
		{"open truncated", []string{"open", truncated}, []string{fmt.Sprintf("%s:%d:%d", base(truncated), cutLine, cutCol)}},
		{"open future schema", []string{"open", future}, []string{base(future), "schema 99"}},
		{"open bad point", []string{"open", badPoint}, []string{base(badPoint), "freq_hz"}},
		{"open missing", []string{"open", filepath.Join(dir, "nosuch.json")}, []string{"nosuch.json"}},
	}
	wd, err := os.Getwd()
	if err != nil {
		t.Fatal(err)
	}
	wdBefore := snapshotDir(t, wd)
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			before := snapshotDir(t, dir)
			var stdout, stderr bytes.Buffer
			code := run(tc.args, &stdout, &stderr)
			if code != 2 {
				t.Errorf("%q: exit %d, want 2; stderr:\n%s", tc.args, code, stderr.String())
			}
			msg := stderr.String()
			for _, w := range tc.want {
				if !strings.Contains(msg, w) {
					t.Errorf("%q: message lacks %q:\n%s", tc.args, w, msg)
				}
			}
			if d := diffSnapshots(before, snapshotDir(t, dir)); len(d) > 0 {
				t.Errorf("%q: files touched: %v", tc.args, d)
			}
		})
	}
	if d := diffSnapshots(wdBefore, snapshotDir(t, wd)); len(d) > 0 {
		t.Errorf("working directory touched: %v", d)
	}
}

// TestBadInputProfileLimit: a cap above the generator profile's own
// max_vpp is bad input, found after connecting to a live (simulated)
// bench but before the output is ever enabled.
func TestBadInputProfileLimit(t *testing.T) {
	dir := t.TempDir()
	src := readRepoFile(t, "testdata/profiles/template-generator.toml")
	if !strings.Contains(src, "max_vpp = 0.0") {
		t.Fatal("template-generator.toml lost its max_vpp line")
	}
	prof := filepath.Join(dir, "lim.toml")
	if err := os.WriteFile(prof, []byte(strings.Replace(src, "max_vpp = 0.0", "max_vpp = 1.0", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	srv := startBench(t)
	before := snapshotDir(t, dir)
	var stdout, stderr bytes.Buffer
	code := run([]string{"sweep", "--gen", "tcp://" + srv.GenAddr(), "--dig", "tcp://" + srv.DigAddr(), "--gen-profile", prof,
		"--max-amp", "5", "--amp", "2", "--headless", "--out", filepath.Join(dir, "s.json")}, &stdout, &stderr)
	if code != 2 {
		t.Errorf("exit %d, want 2; stderr:\n%s", code, stderr.String())
	}
	for _, w := range []string{"--max-amp", "5 Vpp", "1 Vpp"} {
		if !strings.Contains(stderr.String(), w) {
			t.Errorf("message lacks %q:\n%s", w, stderr.String())
		}
	}
	if srv.OutputOn() {
		t.Error("output on after a refused cap")
	}
	if d := diffSnapshots(before, snapshotDir(t, dir)); len(d) > 0 {
		t.Errorf("files touched: %v", d)
	}
}

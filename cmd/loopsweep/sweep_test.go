package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestSweepBadInput(t *testing.T) {
	dir := t.TempDir()
	exists := filepath.Join(dir, "exists.json")
	os.WriteFile(exists, []byte("{}"), 0o644)
	garbage := filepath.Join(dir, "garbage.json")
	os.WriteFile(garbage, []byte("not json"), 0o644)
	out := filepath.Join(dir, "new.json")
	tests := []struct {
		name    string
		args    []string
		wantSub string
	}{
		{"stop not above start", []string{"--sim", "--start", "10k", "--stop", "1k"}, "--stop"},
		{"zero points", []string{"--sim", "--ppd", "0"}, "--ppd"},
		{"amplitude above cap", []string{"--sim", "--amp", "200m", "--max-amp", "100m"}, "--amp"},
		{"negative cycles", []string{"--sim", "--cycles", "-2"}, "--cycles"},
		{"bad SI number", []string{"--sim", "--start", "abc"}, `--start "abc"`},
		{"bad measure", []string{"--sim", "--measure", "phase"}, "--measure"},
		{"bad settle time", []string{"--sim", "--settle-min", "soon"}, "--settle-min"},
		{"negative settle cycles", []string{"--sim", "--settle-cycles", "-1"}, "--settle-cycles"},
		{"no instruments", []string{"--gen", "127.0.0.1:1"}, "--gen and --dig"},
		{"sim and instruments", []string{"--sim", "--gen", "a:1", "--dig", "b:1"}, "--sim and --gen"},
		{"scenario without sim", []string{"--gen", "127.0.0.1:1", "--dig", "127.0.0.1:1", "--scenario", "x"}, "--scenario"},
		{"unreachable generator", []string{"--gen", "127.0.0.1:1", "--dig", "127.0.0.1:1", "--out", out}, "--gen 127.0.0.1:1"},
		{"bad address", []string{"--gen", "ftp://x", "--dig", "127.0.0.1:1", "--out", out}, "--gen ftp://x"},
		{"out exists", []string{"--sim", "--out", exists}, "--out " + exists},
		{"resume missing", []string{"--sim", "--resume", filepath.Join(dir, "none.json")}, "--resume"},
		{"resume garbage", []string{"--sim", "--resume", garbage}, "--resume " + garbage},
		{"missing profile", []string{"--gen", "127.0.0.1:1", "--dig", "127.0.0.1:1", "--gen-profile", filepath.Join(dir, "no.toml"), "--out", out}, "--gen-profile"},
		{"calibration missing", []string{"--sim", "--calibration", filepath.Join(dir, "nocal.json")}, "--calibration"},
		{"extra argument", []string{"--sim", "extra"}, `unexpected argument "extra"`},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var stdout, stderr bytes.Buffer
			err := runSweep(tc.args, &stdout, &stderr)
			var ue *usageError
			if !errors.As(err, &ue) || !strings.Contains(err.Error(), tc.wantSub) {
				t.Errorf("sweep %q: err = %v, want a usage error containing %q", tc.args, err, tc.wantSub)
			}
			if _, err := os.Stat(out); err == nil {
				t.Errorf("bad input wrote %s", out)
				os.Remove(out)
			}
		})
	}
	if b, _ := os.ReadFile(exists); string(b) != "{}" {
		t.Errorf("existing file overwritten")
	}
}

func TestSweepSimHeadlessJSON(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "s.json")
	var stdout, stderr bytes.Buffer
	code := run([]string{"sweep", "--sim", "--headless", "--json", "--out", out, "--start", "1k", "--stop", "5k", "--ppd", "5", "--refine-budget", "0"}, &stdout, &stderr)
	if code != 0 {
		t.Fatalf("exit %d, stderr:\n%s", code, stderr.String())
	}
	var m map[string]any
	if err := json.Unmarshal(stdout.Bytes(), &m); err != nil {
		t.Fatalf("stdout is not JSON: %v\n%s", err, stdout.String())
	}
	// The keys issue 5 requires.
	for _, k := range []string{"crossover_hz", "phase_margin_deg", "phase_crossover_hz", "gain_margin_db", "gain_crossovers", "phase_crossovers", "modulus_margin", "points"} {
		if _, ok := m[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	// 1 kHz to 5 kHz at 5 per decade: round(0.699·5) = 3 steps, 4 points.
	if pts, _ := m["points"].([]any); len(pts) != 4 {
		t.Errorf("%d points, want 4", len(pts))
	}
	if !strings.Contains(stderr.String(), "point 4/4") {
		t.Errorf("progress lacks point 4/4:\n%s", stderr.String())
	}
	if _, err := os.Stat(out); err != nil {
		t.Errorf("session not saved: %v", err)
	}
}

func TestSweepResume(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "s.json")
	args := []string{"sweep", "--sim", "--headless", "--out", out, "--start", "1k", "--stop", "10k", "--ppd", "4", "--refine-budget", "0"}
	var stdout, stderr bytes.Buffer
	if code := run(args, &stdout, &stderr); code != 0 {
		t.Fatalf("first sweep: exit %d\n%s", code, stderr.String())
	}
	// Make it an interrupted session: the last two points unmeasured.
	raw, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(raw, &m); err != nil {
		t.Fatal(err)
	}
	pts := m["points"].([]any)
	if len(pts) != 5 {
		t.Fatalf("%d points, want 5 (1 kHz to 10 kHz at 4 per decade)", len(pts))
	}
	first := pts[0].(map[string]any)["attempts"].([]any)[0].(map[string]any)["started"]
	for _, p := range pts[3:] {
		p.(map[string]any)["attempts"] = []any{}
	}
	m["complete"] = false
	raw, _ = json.Marshal(m)
	if err := os.WriteFile(out, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	stdout.Reset()
	stderr.Reset()
	if code := run([]string{"sweep", "--sim", "--headless", "--resume", out}, &stdout, &stderr); code != 0 {
		t.Fatalf("resume: exit %d\n%s", code, stderr.String())
	}
	if n := strings.Count(stderr.String(), "attempt 1"); n != 2 {
		t.Errorf("resume measured %d points, want the 2 missing ones:\n%s", n, stderr.String())
	}
	raw, _ = os.ReadFile(out)
	m = nil
	if err := json.Unmarshal(raw, &m); err != nil {
		t.Fatal(err)
	}
	if m["complete"] != true {
		t.Errorf("resumed session not complete")
	}
	for i, p := range m["points"].([]any) {
		if a := p.(map[string]any)["attempts"].([]any); len(a) == 0 {
			t.Errorf("point %d unmeasured after resume", i)
		}
	}
	if got := m["points"].([]any)[0].(map[string]any)["attempts"].([]any)[0].(map[string]any)["started"]; got != first {
		t.Errorf("first point's attempt changed on resume: %v, was %v", got, first)
	}
}

func TestSweepCalibrationFiles(t *testing.T) {
	// The simulated bench has no "both probes on one node" set-up, so
	// this checks the plumbing: the calibration file is written from a
	// ratio sweep, and a later sweep applies it and records its name.
	dir := t.TempDir()
	cal := filepath.Join(dir, "cal.json")
	var stdout, stderr bytes.Buffer
	base := []string{"sweep", "--sim", "--headless", "--start", "1k", "--stop", "10k", "--ppd", "2", "--refine-budget", "0"}
	if code := run(append(base, "--out", filepath.Join(dir, "c.json"), "--save-calibration", cal), &stdout, &stderr); code != 0 {
		t.Fatalf("calibration sweep: exit %d\n%s", code, stderr.String())
	}
	raw, err := os.ReadFile(cal)
	if err != nil {
		t.Fatal(err)
	}
	var c struct {
		Points []map[string]float64 `json:"points"`
	}
	if err := json.Unmarshal(raw, &c); err != nil || len(c.Points) != 3 {
		t.Fatalf("calibration file: %v, %d points (want 3: 1k, 3.16k, 10k: one decade at 2 per decade)", err, len(c.Points))
	}
	out := filepath.Join(dir, "s.json")
	stderr.Reset()
	if code := run(append(base, "--out", out, "--calibration", cal), &stdout, &stderr); code != 0 {
		t.Fatalf("calibrated sweep: exit %d\n%s", code, stderr.String())
	}
	raw, _ = os.ReadFile(out)
	var s struct {
		Calibration string `json:"calibration"`
	}
	if err := json.Unmarshal(raw, &s); err != nil || s.Calibration != cal {
		t.Errorf("session records calibration %q (%v), want %q", s.Calibration, err, cal)
	}
}

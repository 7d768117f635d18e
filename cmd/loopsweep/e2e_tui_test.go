package main

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"loopsweep/sweep"
)

// tmuxBench drives the real binary in a detached tmux session on its own
// server socket, so it cannot touch the user's tmux.
type tmuxBench struct {
	t    *testing.T
	sock string
	name string
}

func (b *tmuxBench) tmux(args ...string) (string, error) {
	cmd := exec.Command("tmux", append([]string{"-L", b.sock}, args...)...)
	cmd.Env = append(os.Environ(), "LANG=C.UTF-8", "LC_ALL=C.UTF-8")
	out, err := cmd.CombinedOutput()
	return string(out), err
}

// screen returns the pane's text.
func (b *tmuxBench) screen() string {
	out, err := b.tmux("capture-pane", "-p", "-t", b.name)
	if err != nil {
		b.t.Fatalf("capture-pane: %v: %s", err, out)
	}
	return out
}

func (b *tmuxBench) send(keys ...string) {
	b.t.Helper()
	if out, err := b.tmux(append([]string{"send-keys", "-t", b.name}, keys...)...); err != nil {
		b.t.Fatalf("send-keys %q: %v: %s", keys, err, out)
	}
}

// waitFor polls the screen until re matches, or fails after d.
func (b *tmuxBench) waitFor(what string, re *regexp.Regexp, d time.Duration) string {
	b.t.Helper()
	deadline := time.Now().Add(d)
	var s string
	for time.Now().Before(deadline) {
		s = b.screen()
		if re.MatchString(s) {
			return s
		}
		time.Sleep(100 * time.Millisecond)
	}
	b.t.Fatalf("waited %v for %s (%s); screen:\n%s", d, what, re, s)
	return ""
}

// TestTUIEndToEnd runs `loopsweep sweep --sim` on a 120×40 tmux pane,
// pauses, moves the cursor, re-measures, asks to quit and declines, lets
// the sweep finish and quits, reading the screen at each step.
func TestTUIEndToEnd(t *testing.T) {
	if _, err := exec.LookPath("tmux"); err != nil {
		t.Skip("tmux not installed")
	}
	dir := t.TempDir()
	bin := filepath.Join(dir, "loopsweep")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	session := filepath.Join(dir, "run.json")
	cfg := filepath.Join(dir, "cfg")
	b := &tmuxBench{t: t, sock: fmt.Sprintf("loopsweep-e2e-%d-%d", os.Getpid(), time.Now().UnixNano()), name: "bench"}
	t.Cleanup(func() { b.tmux("kill-server") })
	// The shell line keeps the pane after the program ends so the exit
	// status can be read.
	line := fmt.Sprintf("env LOOPSWEEP_CONFIG_DIR=%s TERM=xterm-256color %s sweep --sim --start 100 --stop 20k --ppd 10 --out %s; echo LOOPSWEEP-EXIT=$?; sleep 60",
		cfg, bin, session)
	if out, err := b.tmux("new-session", "-d", "-s", b.name, "-x", "120", "-y", "40", line); err != nil {
		t.Fatalf("tmux new-session: %v: %s", err, out)
	}

	// First run: the safety note. 'd' dismisses it for good.
	// The sweep is held paused (output off) while the note is up.
	b.waitFor("the safety note over a paused sweep", regexp.MustCompile(`(?s)PAUSED · point.*Before you connect the bench`), 20*time.Second)
	b.send("d")
	// The bench: pause at once so the sweep is still live.
	b.waitFor("the bench screen", regexp.MustCompile(`(RUNNING|STARTING|REFINING) · point`), 10*time.Second)
	b.send("Space")
	s := b.waitFor("the paused state", regexp.MustCompile(`PAUSED · point \d+ of \d+`), 10*time.Second)
	for _, want := range []string{"dB┤", "°┤", "Hz└", "100", "1k", "10k", "Margins", "freq gain dB phase"} {
		if !strings.Contains(s, want) {
			t.Errorf("screen lacks %q:\n%s", want, s)
		}
	}
	if _, err := os.Stat(filepath.Join(cfg, "safety-note-dismissed")); err != nil {
		t.Errorf("safety note dismissal not remembered: %v", err)
	}

	// Move the cursor to the first point, then right once: the table
	// marks row 2 as selected.
	b.send("g")
	b.send("l")
	b.waitFor("the cursor on point 2", regexp.MustCompile(`(?m)^.*[>»]\s+2\s+\S+`), 5*time.Second)
	b.send("r")
	b.waitFor("the re-measure queued", regexp.MustCompile(`point 2 \(\S+ Hz\) queued`), 5*time.Second)

	// A note, then save now.
	b.send("n")
	b.waitFor("the note prompt", regexp.MustCompile(`note: `), 5*time.Second)
	b.send("-l", "probe moved to the output cap")
	b.send("Enter")
	b.waitFor("the note added", regexp.MustCompile(`note added`), 5*time.Second)
	b.send("s")
	b.waitFor("the save", regexp.MustCompile(`saved \S*run\.json`), 5*time.Second)

	// q while paused asks; n declines.
	b.send("q")
	b.waitFor("the quit question", regexp.MustCompile(`quit\? \(y/n\)`), 5*time.Second)
	b.send("n")
	b.waitFor("the question gone", regexp.MustCompile(`PAUSED · point`), 5*time.Second)

	// Resume and let the sweep finish; the margins come in.
	b.send("Space")
	s = b.waitFor("the sweep done", regexp.MustCompile(`DONE · point`), 120*time.Second)
	if !regexp.MustCompile(`PM\s+-?\d+\.\d° ± \d+\.\d°`).MatchString(s) || !regexp.MustCompile(`fc\s+\S+ Hz ± `).MatchString(s) {
		t.Errorf("margins not shown after the sweep:\n%s", s)
	}
	if !regexp.MustCompile(`verdict: (meets targets|FAILS)`).MatchString(s) {
		t.Errorf("no verdict:\n%s", s)
	}

	// Done: q quits at once (nothing live to confirm), output off, saved.
	b.send("q")
	s = b.waitFor("the program to exit", regexp.MustCompile(`LOOPSWEEP-EXIT=\d+`), 20*time.Second)
	if !strings.Contains(s, "LOOPSWEEP-EXIT=0") {
		t.Errorf("exit status not 0:\n%s", s)
	}
	saved, err := sweep.LoadSession(session)
	if err != nil {
		t.Fatalf("session file: %v", err)
	}
	if len(saved.Notes) != 1 || saved.Notes[0].Text != "probe moved to the output cap" {
		t.Errorf("session notes %+v, want the one typed", saved.Notes)
	}

	// Browse the saved session: read-only, the same margins.
	b.name = "browse"
	line = fmt.Sprintf("env LOOPSWEEP_CONFIG_DIR=%s TERM=xterm-256color %s open %s; echo LOOPSWEEP-EXIT=$?; sleep 60", cfg, bin, session)
	if out, err := b.tmux("new-session", "-d", "-s", b.name, "-x", "80", "-y", "24", line); err != nil {
		t.Fatalf("tmux new-session: %v: %s", err, out)
	}
	s = b.waitFor("the browsed session", regexp.MustCompile(`BROWSING · point \d+ of \d+`), 10*time.Second)
	for _, want := range []string{"read-only", "run.json", "Margins", "dB┤", "Hz└"} {
		if !strings.Contains(s, want) {
			t.Errorf("browse screen lacks %q:\n%s", want, s)
		}
	}
	if !regexp.MustCompile(`PM\s+-?\d+\.\d° ± `).MatchString(s) {
		t.Errorf("browse screen has no phase margin:\n%s", s)
	}
	if strings.Contains(s, "Before you connect") {
		t.Error("safety note shown again after 'd' dismissed it")
	}
	b.send("q")
	s = b.waitFor("open to exit", regexp.MustCompile(`LOOPSWEEP-EXIT=\d+`), 10*time.Second)
	if !strings.Contains(s, "LOOPSWEEP-EXIT=0") {
		t.Errorf("open: exit status not 0:\n%s", s)
	}

	// Continue the session on the simulated bench: the plan is complete,
	// so the engine waits; re-measuring point 1 adds at least one
	// attempt (more if the new one needs retries), shown in its details
	// and saved in the file.
	b.name = "continue"
	line = fmt.Sprintf("env LOOPSWEEP_CONFIG_DIR=%s TERM=xterm-256color %s open --sim %s; echo LOOPSWEEP-EXIT=$?; sleep 60", cfg, bin, session)
	if out, err := b.tmux("new-session", "-d", "-s", b.name, "-x", "120", "-y", "40", line); err != nil {
		t.Fatalf("tmux new-session: %v: %s", err, out)
	}
	b.waitFor("the continued session done", regexp.MustCompile(`DONE · point`), 30*time.Second)
	b.send("g")
	s = b.waitFor("point 1 selected", regexp.MustCompile(`pt 1  100 Hz  attempt \d+ of \d+`), 10*time.Second)
	var before int
	fmt.Sscanf(regexp.MustCompile(`attempt \d+ of (\d+)`).FindStringSubmatch(s)[1], "%d", &before)
	b.send("r")
	b.waitFor("point 1 re-measured", regexp.MustCompile(fmt.Sprintf(`pt 1  100 Hz  attempt \d+ of (%d|%d|%d|%d)\b`, before+1, before+2, before+3, before+4)), 30*time.Second)
	// q asks if the re-measure is still running; y then stops.
	b.send("q")
	if s = b.waitFor("the question or the exit", regexp.MustCompile(`quit\? \(y/n\)|LOOPSWEEP-EXIT=\d+`), 20*time.Second); strings.Contains(s, "(y/n)") {
		b.send("y")
	}
	b.waitFor("the continued session to exit", regexp.MustCompile(`LOOPSWEEP-EXIT=\d+`), 20*time.Second)
	if cont, err := sweep.LoadSession(session); err != nil {
		t.Errorf("continued session: %v", err)
	} else if n := len(cont.Points[0].Attempts); n <= before {
		t.Errorf("point 1 has %d attempts after re-measuring, want more than %d", n, before)
	}
}

func TestOpenBadInput(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "s.json")
	s := sweep.Session{Schema: 1, Settings: sweep.Defaults(), Points: []sweep.Point{{FreqHz: 100, Chosen: -1}}}
	if err := sweep.SaveSession(good, &s); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name string
		args []string
		code int
		want string
	}{
		{"no file", []string{"open"}, 2, "want one session FILE"},
		{"missing file", []string{"open", filepath.Join(dir, "none.json")}, 2, "none.json"},
		{"instrument flag without --sim", []string{"open", "--scenario", "x", good}, 2, "--scenario"},
		{"bad target", []string{"open", "--pm-target", "-3", good}, 2, "--pm-target"},
		{"no terminal", []string{"open", good}, 1, "needs a terminal"},
	}
	saved := openOnTerminal
	openOnTerminal = func() bool { return false }
	defer func() { openOnTerminal = saved }()
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var out, errb strings.Builder
			if code := run(tt.args, &out, &errb); code != tt.code || !strings.Contains(errb.String(), tt.want) {
				t.Errorf("exit %d, stderr %q; want %d and %q", code, errb.String(), tt.code, tt.want)
			}
		})
	}
}

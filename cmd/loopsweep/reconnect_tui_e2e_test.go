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

	"loopsweep/sim"
)

// TestReconnectTUIEndToEnd runs the bench screen in tmux against a
// simulated bench served by this test, makes the bench stop answering
// mid-sweep and reads the screen: the waiting state with the command
// that went unanswered, the output off; space pauses the tries, and
// after the bench is repaired space resumes, the screen reports the
// reconnection and the sweep completes in the same run with every
// point once. A second run quits with ctrl+c while waiting: the
// program exits and the output is off.
func TestReconnectTUIEndToEnd(t *testing.T) {
	if _, err := exec.LookPath("tmux"); err != nil {
		t.Skip("tmux not installed")
	}
	bin := buildSafetyBinary(t)
	dir := t.TempDir()
	cfg := filepath.Join(dir, "cfg")
	if err := os.MkdirAll(cfg, 0o755); err != nil {
		t.Fatal(err)
	}
	// The first-run note was read before (tui/safety.go keeps this file).
	if err := os.WriteFile(filepath.Join(cfg, "safety-note-dismissed"), nil, 0o644); err != nil {
		t.Fatal(err)
	}
	b := &tmuxBench{t: t, sock: fmt.Sprintf("loopsweep-rc-%d-%d", os.Getpid(), time.Now().UnixNano())}
	t.Cleanup(func() { b.tmux("kill-server") })
	// 11 points with 200 ms of settling each: a few seconds of sweep, so
	// the fault lands mid-sweep.
	start := func(name string, srv *sim.Server, out string) {
		b.name = name
		line := fmt.Sprintf("env LOOPSWEEP_CONFIG_DIR=%s TERM=xterm-256color %s sweep --gen tcp://%s --dig tcp://%s --timeout 300ms --out %s "+
			"--start 1k --stop 10k --ppd 10 --refine-budget 0 --settle-min 200ms; echo LOOPSWEEP-EXIT=$?; sleep 60",
			cfg, bin, srv.GenAddr(), srv.DigAddr(), out)
		if out, err := b.tmux("new-session", "-d", "-s", b.name, "-x", "160", "-y", "40", line); err != nil {
			t.Fatalf("tmux new-session: %v: %s", err, out)
		}
	}
	// A bench that answers nothing cannot confirm the off: the screen
	// says so, and the test reads the simulator's output instead.
	noAnswer := regexp.MustCompile(`NO ANSWER · output off( NOT confirmed)?, reconnecting.*\n.*NO ANSWER: .*"[^"]+" on tcp://127\.0\.0\.1:\d+: .*timeout`)

	t.Run("pause while waiting, repair, resume", func(t *testing.T) {
		b.t = t
		srv := startBench(t)
		out := filepath.Join(dir, "run.json")
		start("rc", srv, out)
		b.waitFor("the sweep under way", regexp.MustCompile(`RUNNING · point [3-8] of 11`), 30*time.Second)
		srv.SetFaults(sim.Faults{ReplyDelay: 2 * time.Second})
		s := b.waitFor("the waiting state", noAnswer, 20*time.Second)
		t.Logf("screen while waiting:\n%s", s)
		if srv.OutputOn() {
			t.Error("output on while the screen says it is off")
		}
		b.waitFor("a failed try", regexp.MustCompile(`\(try \d+ failed, next in \S+\)`), 20*time.Second)
		b.send("Space")
		b.waitFor("the tries paused", regexp.MustCompile(`PAUSED · point`), 20*time.Second)
		if srv.OutputOn() {
			t.Error("output on while paused")
		}
		srv.SetFaults(sim.Faults{})
		b.send("Space")
		b.waitFor("the reconnection", regexp.MustCompile(`reconnected after \S+ \(\d+ tr(y|ies)\): settings applied again, resuming at point \d+`), 30*time.Second)
		b.waitFor("the sweep done", regexp.MustCompile(`DONE · point 11 of 11`), 60*time.Second)
		if srv.OutputOn() {
			t.Error("output on after the sweep")
		}
		b.send("q")
		s = b.waitFor("the program to exit", regexp.MustCompile(`LOOPSWEEP-EXIT=\d+`), 20*time.Second)
		if !strings.Contains(s, "LOOPSWEEP-EXIT=0") {
			t.Errorf("exit status not 0:\n%s", s)
		}
		checkEveryPointOnce(t, out, 0, time.Time{})
	})

	t.Run("ctrl+c while waiting", func(t *testing.T) {
		b.t = t
		srv := startBench(t)
		out := filepath.Join(dir, "quit.json")
		start("rcq", srv, out)
		b.waitFor("the sweep under way", regexp.MustCompile(`RUNNING · point [3-8] of 11`), 30*time.Second)
		srv.SetFaults(sim.Faults{ReplyDelay: 2 * time.Second})
		b.waitFor("the waiting state", noAnswer, 20*time.Second)
		b.send("C-c")
		s := b.waitFor("the program to exit", regexp.MustCompile(`LOOPSWEEP-EXIT=\d+`), 30*time.Second)
		t.Logf("screen after ctrl+c:\n%s", s)
		if !outputOffSoon(srv, 3*time.Second) {
			t.Error("output on after quitting while waiting")
		}
		checkSessionHolds(t, out, 2)
	})
}

package main

import (
	"bufio"
	"errors"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"loopsweep/instr"
	"loopsweep/sim"
)

// The helper process: the test binary re-executed with
// LOOPSWEEP_SAFETY_HELPER=<mode> and LOOPSWEEP_SAFETY_MARKER=<file>. Its
// cleanup appends "off" and "save" lines to the marker file, so the
// parent can count how many times each ran.
const (
	helperModeEnv   = "LOOPSWEEP_SAFETY_HELPER"
	helperMarkerEnv = "LOOPSWEEP_SAFETY_MARKER"
)

func TestSafetyHelperProcess(t *testing.T) {
	mode := os.Getenv(helperModeEnv)
	if mode == "" {
		t.Skip("helper process for TestSafety*; runs only when re-executed")
	}
	marker := os.Getenv(helperMarkerEnv)
	mark := func(what string) func() error {
		return func() error {
			f, err := os.OpenFile(marker, os.O_APPEND|os.O_CREATE|os.O_WRONLY, 0o644)
			if err != nil {
				return err
			}
			defer f.Close()
			_, err = f.WriteString(what + "\n")
			return err
		}
	}
	s := newSafety(mark("off"), mark("save"))
	s.grace = 300 * time.Millisecond
	ready := func() { os.Stdout.WriteString("ready\n") }
	switch mode {
	case "normal":
		s.Done()
		os.Exit(0)
	case "graceful": // honours the context, returns through Done
		ready()
		<-s.Context().Done()
		s.Done()
		os.Exit(1)
	case "stuck": // ignores the context: the grace timer exits
		ready()
		select {}
	case "panic-go":
		s.Go(func() { panic("boom in a goroutine") })
		select {}
	case "panic-main":
		func() {
			defer s.Done()
			panic("boom in main")
		}()
	case "cleanup-fails":
		s.off = func() error { return errors.New("generator unreachable") }
		s.Done()
		os.Exit(0)
	}
	os.Exit(99) // not reached in any mode
}

type helperResult struct {
	code   int
	stderr string
	marker []string
}

// runHelper starts the helper in mode; when sig is non-zero it waits for
// "ready", sends sig (twice if twice), and waits for the exit.
func runHelper(t *testing.T, mode string, sig syscall.Signal, twice bool) helperResult {
	t.Helper()
	marker := filepath.Join(t.TempDir(), "marker")
	cmd := exec.Command(os.Args[0], "-test.run=^TestSafetyHelperProcess$")
	cmd.Env = append(os.Environ(), helperModeEnv+"="+mode, helperMarkerEnv+"="+marker)
	var stderr strings.Builder
	cmd.Stderr = &stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	if sig != 0 {
		line, err := bufio.NewReader(out).ReadString('\n')
		if err != nil || line != "ready\n" {
			cmd.Process.Kill()
			t.Fatalf("helper %s: read ready: %q, %v", mode, line, err)
		}
		cmd.Process.Signal(sig)
		if twice {
			time.Sleep(50 * time.Millisecond)
			cmd.Process.Signal(sig)
		}
	}
	timer := time.AfterFunc(20*time.Second, func() { cmd.Process.Kill() })
	defer timer.Stop()
	err = cmd.Wait()
	code := 0
	var ee *exec.ExitError
	if errors.As(err, &ee) {
		code = ee.ExitCode()
	} else if err != nil {
		t.Fatalf("helper %s: %v", mode, err)
	}
	b, _ := os.ReadFile(marker)
	return helperResult{code: code, stderr: stderr.String(), marker: strings.Fields(string(b))}
}

// TestSafetyCleanupOnce: every exit path runs the cleanup exactly once,
// output off before save, with the exit status the path calls for.
// Expected statuses: 128+signal number is the shell convention for a
// process ended by a signal (POSIX shell, "Exit Status"; SIGINT 2,
// SIGHUP 1, SIGTERM 15 per POSIX signal.h, memory); 1 is loopsweep's
// status for a failure (README).
func TestSafetyCleanupOnce(t *testing.T) {
	tests := []struct {
		name     string
		mode     string
		sig      syscall.Signal
		twice    bool
		wantCode int
		wantErr  string
	}{
		{"normal return", "normal", 0, false, 0, ""},
		{"SIGINT, program returns", "graceful", syscall.SIGINT, false, 1, "interrupt: turning the output off"},
		{"SIGTERM, program returns", "graceful", syscall.SIGTERM, false, 1, "terminated: turning the output off"},
		{"SIGHUP, program returns", "graceful", syscall.SIGHUP, false, 1, "hangup: turning the output off"},
		{"SIGTERM, program stuck", "stuck", syscall.SIGTERM, false, 128 + 15, "terminated"},
		{"SIGHUP, program stuck", "stuck", syscall.SIGHUP, false, 128 + 1, "hangup"},
		{"SIGINT twice", "stuck", syscall.SIGINT, true, 128 + 2, "interrupt"},
		{"panic in a goroutine", "panic-go", 0, false, 1, "internal error (panic): boom in a goroutine"},
		{"panic in main", "panic-main", 0, false, 1, "internal error (panic): boom in main"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := runHelper(t, tc.mode, tc.sig, tc.twice)
			if r.code != tc.wantCode {
				t.Errorf("exit status %d, want %d; stderr:\n%s", r.code, tc.wantCode, r.stderr)
			}
			if strings.Join(r.marker, ",") != "off,save" {
				t.Errorf("cleanup ran as %q, want exactly off then save", r.marker)
			}
			if !strings.Contains(r.stderr, tc.wantErr) {
				t.Errorf("stderr lacks %q:\n%s", tc.wantErr, r.stderr)
			}
			if strings.HasPrefix(tc.mode, "panic") && !strings.Contains(r.stderr, "goroutine") {
				t.Errorf("panic report lacks the stack:\n%s", r.stderr)
			}
		})
	}
}

// TestSafetyCleanupFailureReported: a failing off is reported and the
// save still runs.
func TestSafetyCleanupFailureReported(t *testing.T) {
	r := runHelper(t, "cleanup-fails", 0, false)
	if strings.Join(r.marker, ",") != "save" {
		t.Errorf("cleanup ran as %q, want the save alone (off replaced by a failure)", r.marker)
	}
	if !strings.Contains(r.stderr, "cleanup: turn the output off: generator unreachable") {
		t.Errorf("stderr lacks the off failure:\n%s", r.stderr)
	}
}

// TestSafetyInProcess: Cleanup is idempotent and Done cancels the
// context, without a subprocess.
func TestSafetyInProcess(t *testing.T) {
	n := 0
	s := newSafety(func() error { n++; return nil }, nil)
	s.Cleanup()
	s.Cleanup()
	s.Done()
	s.Done()
	if n != 1 {
		t.Errorf("off ran %d times, want 1", n)
	}
	if s.Context().Err() == nil {
		t.Error("context not cancelled by Done")
	}
}

// rawCommand sends SCPI lines to addr over a plain socket (not instr), to
// put the simulator in a state behind the code under test.
func rawCommand(t *testing.T, addr string, lines ...string) net.Conn {
	t.Helper()
	c, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatal(err)
	}
	for _, l := range lines {
		if _, err := fmt.Fprintf(c, "%s\n", l); err != nil {
			t.Fatal(err)
		}
	}
	// A query answered means every line before it was executed.
	fmt.Fprintf(c, "*OPC?\n")
	if _, err := bufio.NewReader(c).ReadString('\n'); err != nil {
		t.Fatal(err)
	}
	return c
}

// TestOffOverFreshLink: the sweep's link is dropped with the output on
// (the simulator keeps it on, as a real generator does); a new link
// turns it off. Commands are the built-in generic profile's SCPI-1999
// tree (README, "Profiles").
func TestOffOverFreshLink(t *testing.T) {
	srv, err := sim.Start(sim.Options{Listen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Close()
	p, err := instr.BuiltinProfile("generator")
	if err != nil {
		t.Fatal(err)
	}
	c := rawCommand(t, srv.GenAddr(), "SOURce1:VOLTage 0.01", "OUTPut1:STATe ON")
	defer c.Close()
	if !srv.OutputOn() {
		t.Fatal("set-up: the output did not come on")
	}
	srv.DropConnections()
	primary := func() error { return errors.New("write: broken pipe") }
	if err := offWithFallback(primary, srv.GenAddr(), p, 2*time.Second)(); err != nil {
		t.Fatalf("off with fallback: %v", err)
	}
	if srv.OutputOn() {
		t.Error("output still on after the off over a new link")
	}
	// Nothing listening: both failures are named and the user is told
	// to act.
	l, _ := net.Listen("tcp", "127.0.0.1:0")
	dead := l.Addr().String()
	l.Close()
	err = offWithFallback(primary, dead, p, 300*time.Millisecond)()
	if err == nil || !strings.Contains(err.Error(), "broken pipe") || !strings.Contains(err.Error(), "may still be ON") {
		t.Errorf("off to a dead address: err = %v, want both failures and the warning", err)
	}
}

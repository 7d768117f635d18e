package main

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"loopsweep/sim"
	"loopsweep/sweep"
)

// End-to-end safety tests: the real loopsweep binary, a simulated bench
// served by this test process over 127.0.0.1, and after every exit path
// the simulator's own record of the generator's output state.

// buildSafetyBinary builds loopsweep into a temporary directory.
func buildSafetyBinary(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "loopsweep")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

func startBench(t *testing.T) *sim.Server {
	t.Helper()
	srv, err := sim.Start(sim.Options{Listen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { srv.Close() })
	return srv
}

// sweepRun is one loopsweep process; its stderr lines are collected as
// they arrive.
type sweepRun struct {
	cmd    *exec.Cmd
	stdout bytes.Buffer
	mu     sync.Mutex
	lines  []string
	eof    chan struct{}
}

// startSweepProc runs `loopsweep sweep --gen tcp://G --dig tcp://D
// --headless ARGS...`.
func startSweepProc(t *testing.T, bin string, srv *sim.Server, args ...string) *sweepRun {
	t.Helper()
	full := append([]string{"sweep", "--gen", "tcp://" + srv.GenAddr(), "--dig", "tcp://" + srv.DigAddr(), "--headless"}, args...)
	r := &sweepRun{cmd: exec.Command(bin, full...), eof: make(chan struct{})}
	r.cmd.Stdout = &r.stdout
	pipe, err := r.cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := r.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() {
		defer close(r.eof)
		sc := bufio.NewScanner(pipe)
		for sc.Scan() {
			r.mu.Lock()
			r.lines = append(r.lines, sc.Text())
			r.mu.Unlock()
		}
	}()
	t.Cleanup(func() { r.cmd.Process.Kill() })
	return r
}

func (r *sweepRun) stderr() string {
	r.mu.Lock()
	defer r.mu.Unlock()
	return strings.Join(r.lines, "\n")
}

// waitLine waits until a stderr line matches re; false on timeout or
// when the process ended first.
func (r *sweepRun) waitLine(re *regexp.Regexp, d time.Duration) bool {
	deadline := time.Now().Add(d)
	for time.Now().Before(deadline) {
		r.mu.Lock()
		for _, l := range r.lines {
			if re.MatchString(l) {
				r.mu.Unlock()
				return true
			}
		}
		r.mu.Unlock()
		select {
		case <-r.eof:
			// one last look below
			r.mu.Lock()
			defer r.mu.Unlock()
			for _, l := range r.lines {
				if re.MatchString(l) {
					return true
				}
			}
			return false
		case <-time.After(5 * time.Millisecond):
		}
	}
	return false
}

// wait waits for the exit (at most d) and returns the exit status; −1
// for a process ended by a signal.
func (r *sweepRun) wait(t *testing.T, d time.Duration) int {
	t.Helper()
	timer := time.AfterFunc(d, func() { r.cmd.Process.Kill() })
	defer timer.Stop()
	err := r.cmd.Wait()
	<-r.eof
	var ee *exec.ExitError
	if errors.As(err, &ee) {
		return ee.ExitCode()
	}
	if err != nil {
		t.Fatalf("wait: %v", err)
	}
	return 0
}

var progressRE = regexp.MustCompile(`^point (\d+)/(\d+) `)

// startedUpTo is the largest point number k of a "point k/N" progress
// line. The engine prints it only after it saved the session with every
// earlier plan point measured (sweep/measure.go: runJob saves before the
// next job's PointStarted), so points 1..k−1 must be in the file.
func (r *sweepRun) startedUpTo() int {
	r.mu.Lock()
	defer r.mu.Unlock()
	k := 0
	for _, l := range r.lines {
		if m := progressRE.FindStringSubmatch(l); m != nil {
			n, _ := strconv.Atoi(m[1])
			k = max(k, n)
		}
	}
	return k
}

// outputOffSoon polls the simulator's output state for up to d: after
// the client exits, the simulator may still be executing the lines the
// client sent last (a delayed reply holds the next line back).
func outputOffSoon(srv *sim.Server, d time.Duration) bool {
	deadline := time.Now().Add(d)
	for {
		if !srv.OutputOn() {
			return true
		}
		if time.Now().After(deadline) {
			return false
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// checkSessionHolds checks that the first n points of the session file have
// at least one attempt, and returns the session.
func checkSessionHolds(t *testing.T, path string, n int) *sweep.Session {
	t.Helper()
	s, err := sweep.LoadSession(path)
	if err != nil {
		t.Fatalf("session file after the exit: %v", err)
	}
	if n > len(s.Points) {
		t.Fatalf("session has %d points, %d were completed", len(s.Points), n)
	}
	for i := 0; i < n; i++ {
		if len(s.Points[i].Attempts) == 0 {
			t.Errorf("point %d (%g Hz) was completed before the exit but is not in the session", i+1, s.Points[i].FreqHz)
		}
	}
	return s
}

// A short, slow-enough plan: 1 kHz to 10 kHz at 10 per decade is 11
// points; 30 ms of settling per point keeps the sweep running for about
// half a second so signals and faults land mid-sweep.
var safetyPlan = []string{"--start", "1k", "--stop", "10k", "--ppd", "10", "--refine-budget", "0", "--settle-min", "30ms"}

func TestSafetyEndToEnd(t *testing.T) {
	bin := buildSafetyBinary(t)
	point3 := regexp.MustCompile(`^point 3/`)

	t.Run("normal end", func(t *testing.T) {
		srv := startBench(t)
		out := filepath.Join(t.TempDir(), "s.json")
		r := startSweepProc(t, bin, srv, "--out", out, "--start", "1k", "--stop", "10k", "--ppd", "3", "--refine-budget", "0")
		if code := r.wait(t, 30*time.Second); code != 0 {
			t.Fatalf("exit %d, stderr:\n%s", code, r.stderr())
		}
		if !outputOffSoon(srv, 0) {
			t.Error("output on after a normal end")
		}
		// 1 kHz to 10 kHz at 3 per decade: 4 points, all measured.
		s := checkSessionHolds(t, out, 4)
		if !s.Complete || len(s.Points) != 4 {
			t.Errorf("complete %v with %d points, want a complete 4-point session", s.Complete, len(s.Points))
		}
	})

	for _, sig := range []struct {
		name string
		sig  syscall.Signal
	}{{"SIGINT", syscall.SIGINT}, {"SIGTERM", syscall.SIGTERM}, {"SIGHUP", syscall.SIGHUP}} {
		t.Run(sig.name, func(t *testing.T) {
			srv := startBench(t)
			out := filepath.Join(t.TempDir(), "s.json")
			r := startSweepProc(t, bin, srv, append([]string{"--out", out}, safetyPlan...)...)
			if !r.waitLine(point3, 20*time.Second) {
				t.Fatalf("no progress to point 3; stderr:\n%s", r.stderr())
			}
			if !srv.OutputOn() {
				t.Fatalf("output off mid-sweep before the signal: the test would prove nothing")
			}
			r.cmd.Process.Signal(sig.sig)
			code := r.wait(t, 20*time.Second)
			// README: 1 when interrupted, output off, session saved.
			if code != 1 {
				t.Errorf("exit %d after %s, want 1; stderr:\n%s", code, sig.name, r.stderr())
			}
			if !outputOffSoon(srv, 0) {
				t.Errorf("output on after %s", sig.name)
			}
			if !strings.Contains(r.stderr(), "--resume "+out) {
				t.Errorf("the message does not say how to resume:\n%s", r.stderr())
			}
			checkSessionHolds(t, out, r.startedUpTo()-1)
		})
	}

	// Faults injected mid-sweep (after point 3 started). Each must end
	// the sweep with a message naming what went wrong, leave the output
	// off, keep every completed point, and a --resume on the repaired
	// bench must complete the session without re-measuring them.
	faults := []struct {
		name    string
		timeout string
		inject  func(*sim.Server)
		wantErr []string
	}{
		{"instrument error", "5s", func(s *sim.Server) { s.PushError(true, -222, "Data out of range") },
			[]string{"generator reported an error", "-222", "Data out of range"}},
		{"digitizer error", "5s", func(s *sim.Server) { s.PushError(false, -350, "Queue overflow") },
			[]string{"reported error -350", "Queue overflow", `after "`}}, // names the command it followed
		{"delayed answers", "200ms", func(s *sim.Server) { s.SetFaults(sim.Faults{ReplyDelay: 600 * time.Millisecond}) },
			[]string{"timeout"}},
		{"corrupt block header", "5s", func(s *sim.Server) { s.SetFaults(sim.Faults{CorruptBlocks: 1}) },
			[]string{"block"}},
		{"truncated block", "300ms", func(s *sim.Server) { s.SetFaults(sim.Faults{TruncateBlocks: 1}) },
			[]string{"timeout"}},
		{"dropped connection", "2s", func(s *sim.Server) { s.DropConnections() },
			[]string{"sweep failed"}},
	}
	for _, fc := range faults {
		t.Run(fc.name, func(t *testing.T) {
			srv := startBench(t)
			out := filepath.Join(t.TempDir(), "s.json")
			// --reconnect-window 0: the path without reconnection
			// (reconnect_e2e_test.go covers reconnecting in the run).
			r := startSweepProc(t, bin, srv, append([]string{"--out", out, "--timeout", fc.timeout, "--reconnect-window", "0"}, safetyPlan...)...)
			if !r.waitLine(point3, 20*time.Second) {
				t.Fatalf("no progress to point 3; stderr:\n%s", r.stderr())
			}
			fc.inject(srv)
			code := r.wait(t, 30*time.Second)
			if code != 1 {
				t.Errorf("exit %d, want 1 (sweep failed); stderr:\n%s", code, r.stderr())
			}
			msg := r.stderr()
			t.Logf("stderr:\n%s", msg)
			for _, w := range fc.wantErr {
				if !strings.Contains(msg, w) {
					t.Errorf("message lacks %q:\n%s", w, msg)
				}
			}
			if !outputOffSoon(srv, 3*time.Second) {
				// A generator keeps its output on when its link is lost
				// (sim.Faults.DropAfter doc): turning it off then needs a
				// fresh connection (offOverFreshLink in signals.go).
				t.Errorf("output still on 3 s after the exit (%s): the off command never reached the generator", fc.name)
			}
			done := r.startedUpTo() - 1
			before := checkSessionHolds(t, out, done)

			// Repair the bench and continue.
			srv.SetFaults(sim.Faults{})
			r2 := startSweepProc(t, bin, srv, "--resume", out)
			if code := r2.wait(t, 30*time.Second); code != 0 {
				t.Fatalf("--resume after %s: exit %d; stderr:\n%s", fc.name, code, r2.stderr())
			}
			after := checkSessionHolds(t, out, len(before.Points))
			if !after.Complete {
				t.Errorf("resumed session not complete")
			}
			sameFirstAttempts(t, before, after)
			if !outputOffSoon(srv, 0) {
				t.Error("output on after the resumed sweep")
			}
		})
	}
}

// sameFirstAttempts: every point measured before keeps its attempts
// (compared by start time and value) after a resume.
func sameFirstAttempts(t *testing.T, before, after *sweep.Session) {
	t.Helper()
	for i, p := range before.Points {
		if len(p.Attempts) == 0 {
			continue
		}
		q := after.Points[i]
		if q.FreqHz != p.FreqHz || len(q.Attempts) < len(p.Attempts) {
			t.Errorf("point %d: %g Hz with %d attempts became %g Hz with %d", i+1, p.FreqHz, len(p.Attempts), q.FreqHz, len(q.Attempts))
			continue
		}
		a, b := p.Attempts[0], q.Attempts[0]
		if !a.Started.Equal(b.Started) || a.Re != b.Re || a.Im != b.Im {
			t.Errorf("point %d: first attempt changed by the resume (%v %g%+gi -> %v %g%+gi)", i+1, a.Started, a.Re, a.Im, b.Started, b.Re, b.Im)
		}
	}
}

// TestSafetySIGKILLResume kills the sweep with SIGKILL at random moments,
// at least 20 times: after each kill the session file (written by
// temporary file, fsync and rename) must load as a valid session and
// hold every point completed before the kill; the next run continues it
// with --resume, and a final --resume completes it.
func TestSafetySIGKILLResume(t *testing.T) {
	bin := buildSafetyBinary(t)
	srv := startBench(t)
	dir := t.TempDir()
	seed := uint64(time.Now().UnixNano())
	t.Logf("seed %d", seed)
	rng := rand.New(rand.NewPCG(seed, 1))
	const wantKills = 20
	kills, sessions := 0, 0
	out := ""
	var prev *sweep.Session
	for try := 0; kills < wantKills && try < 5*wantKills; try++ {
		var r *sweepRun
		if out == "" {
			sessions++
			out = filepath.Join(dir, fmt.Sprintf("s%d.json", sessions))
			r = startSweepProc(t, bin, srv, append([]string{"--out", out}, safetyPlan...)...)
			prev = nil
		} else {
			r = startSweepProc(t, bin, srv, "--resume", out)
		}
		// Wait for the sweep to be under way, then a random 0-250 ms.
		if !r.waitLine(progressRE, 20*time.Second) {
			code := r.wait(t, 10*time.Second)
			if code == 0 && prev != nil {
				// The resumed run had nothing left to do.
				out = ""
				continue
			}
			t.Fatalf("run %d: no progress; exit %d; stderr:\n%s", try, code, r.stderr())
		}
		time.Sleep(time.Duration(rng.IntN(250)) * time.Millisecond)
		r.cmd.Process.Signal(syscall.SIGKILL)
		code := r.wait(t, 10*time.Second)
		if code == 0 {
			// It finished before the kill: a complete session.
			s := checkSessionHolds(t, out, 0)
			if !s.Complete {
				t.Fatalf("run %d exited 0 with an incomplete session", try)
			}
			out = ""
			continue
		}
		kills++
		if _, err := os.Stat(out); errors.Is(err, os.ErrNotExist) {
			if r.startedUpTo() > 1 {
				t.Fatalf("kill %d: no session file, but %d points were completed", kills, r.startedUpTo()-1)
			}
			out = ""
			continue
		}
		s := checkSessionHolds(t, out, r.startedUpTo()-1)
		if prev != nil {
			sameFirstAttempts(t, prev, s)
		}
		prev = s
		if t.Failed() {
			t.Fatalf("after kill %d; stderr:\n%s", kills, r.stderr())
		}
	}
	if kills < wantKills {
		t.Fatalf("only %d kills landed mid-sweep", kills)
	}
	if out != "" {
		r := startSweepProc(t, bin, srv, "--resume", out)
		if code := r.wait(t, 30*time.Second); code != 0 {
			t.Fatalf("final --resume: exit %d; stderr:\n%s", code, r.stderr())
		}
		s := checkSessionHolds(t, out, 11)
		if !s.Complete {
			t.Error("final resumed session not complete")
		}
		if prev != nil {
			sameFirstAttempts(t, prev, s)
		}
	}
	if out == "" {
		// The last kill landed before any point was saved (or the last
		// run finished): SIGKILL leaves the output as it was, so a final
		// complete sweep must be the one that leaves the bench off.
		out = filepath.Join(dir, "final.json")
		r := startSweepProc(t, bin, srv, append([]string{"--out", out}, safetyPlan...)...)
		if code := r.wait(t, 30*time.Second); code != 0 {
			t.Fatalf("final sweep: exit %d; stderr:\n%s", code, r.stderr())
		}
	}
	if !outputOffSoon(srv, 0) {
		t.Error("output on after the final sweep")
	}
	t.Logf("%d kills over %d sessions", kills, sessions)
}

// TestGuardedBenchDroppedLink shows the wiring that closes the dropped
// link case above, in process: the bench's generator behind a
// sweep.Guard, the engine failing when the simulator drops every
// connection mid-sweep with the output on, and the safety's off
// (offWithFallback: the guard's Off, then a new connection) leaving the
// simulator's output off.
func TestGuardedBenchDroppedLink(t *testing.T) {
	srv := startBench(t)
	b := &bench{}
	if err := openInstruments(b, srv.GenAddr(), srv.DigAddr(), "", "", time.Second); err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	gp, err := loadProfile("gen-profile", "", "generator")
	if err != nil {
		t.Fatal(err)
	}
	set := sweep.Defaults()
	set.StartHz, set.StopHz, set.PerDecade, set.RefineBudget = 1e3, 1e4, 10, 0
	set.SettleMin = 30 * time.Millisecond
	guard, err := sweep.NewGuard(b.gen, set.MaxAmpVpp, nil)
	if err != nil {
		t.Fatal(err)
	}
	events := make(chan sweep.Event, 64)
	eng, err := sweep.New(sweep.Config{Settings: set, Gen: guard, Dig: b.dig, Out: filepath.Join(t.TempDir(), "s.json"),
		ACCoupling: b.ac, FixedOffset: b.fixedOff, MaxPoints: b.maxPoints, Events: events})
	if err != nil {
		t.Fatal(err)
	}
	saf := newSafety(offWithFallback(guard.Shutdown, srv.GenAddr(), gp, time.Second), eng.Save)
	runErr := make(chan error, 1)
	saf.Go(func() { runErr <- eng.Run(saf.Context()) })
	dropped := false
	for ev := range events {
		if ps, ok := ev.(sweep.PointStarted); ok && ps.Index == 2 && !dropped {
			if !srv.OutputOn() {
				t.Fatal("output off mid-sweep: the test would prove nothing")
			}
			srv.DropConnections()
			dropped = true
		}
	}
	if err := <-runErr; err == nil {
		t.Fatal("the sweep survived a dropped link")
	}
	if !srv.OutputOn() {
		t.Log("note: the engine's own off reached the generator")
	}
	saf.Done()
	if srv.OutputOn() {
		t.Error("output on after the safety's cleanup")
	}
}

// panicHook is the test-only environment variable that makes the sweep
// command panic in its progress goroutine after N measured points.
const panicHook = "LOOPSWEEP_TEST_PANIC_AFTER"

// TestSafetyPanicE2E: a panic in a goroutine of the sweep command turns
// the output off, keeps the session and exits 1 with the panic on
// stderr. It needs the hook in sweep.go; until the hook lands it says
// so and skips.
func TestSafetyPanicE2E(t *testing.T) {
	src, err := os.ReadFile("sweep.go")
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(src, []byte(panicHook)) {
		t.Skip("cmd/loopsweep/sweep.go has no " + panicHook + " hook yet (see the safety report)")
	}
	bin := buildSafetyBinary(t)
	srv := startBench(t)
	out := filepath.Join(t.TempDir(), "s.json")
	full := append([]string{"sweep", "--gen", "tcp://" + srv.GenAddr(), "--dig", "tcp://" + srv.DigAddr(), "--headless", "--out", out}, safetyPlan...)
	cmd := exec.Command(bin, full...)
	cmd.Env = append(os.Environ(), panicHook+"=3")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	err = cmd.Run()
	var ee *exec.ExitError
	if !errors.As(err, &ee) || ee.ExitCode() != 1 {
		t.Errorf("exit %v, want status 1; stderr:\n%s", err, stderr.String())
	}
	if !strings.Contains(stderr.String(), "internal error (panic)") {
		t.Errorf("stderr lacks the panic report:\n%s", stderr.String())
	}
	if !outputOffSoon(srv, time.Second) {
		t.Error("output on after a panic")
	}
	// Three points were measured before the panic.
	checkSessionHolds(t, out, 3)
}

// TestSweepStdoutDevNull: stdout sent to /dev/null with no controlling
// terminal (cron, nohup, a service) is "not a terminal" (README,
// Sweeps: headless then), although /dev/null is a character device. The
// sweep must run headless and complete, not try the bench screen.
func TestSweepStdoutDevNull(t *testing.T) {
	bin := buildSafetyBinary(t)
	srv := startBench(t)
	out := filepath.Join(t.TempDir(), "s.json")
	devnull, err := os.OpenFile(os.DevNull, os.O_WRONLY, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer devnull.Close()
	cmd := exec.Command(bin, "sweep", "--gen", "tcp://"+srv.GenAddr(), "--dig", "tcp://"+srv.DigAddr(),
		"--out", out, "--start", "1k", "--stop", "10k", "--ppd", "3", "--refine-budget", "0")
	cmd.Stdout = devnull
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	cmd.SysProcAttr = &syscall.SysProcAttr{Setsid: true} // no controlling terminal
	if err := cmd.Run(); err != nil {
		t.Fatalf("sweep with stdout on %s: %v; stderr:\n%s", os.DevNull, err, stderr.String())
	}
	checkSessionHolds(t, out, 4)
	if srv.OutputOn() {
		t.Error("output on after the sweep")
	}
}

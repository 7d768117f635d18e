package main

import (
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"loopsweep/sim"
	"loopsweep/sweep"
)

// End-to-end reconnection: the real binary, headless, against a
// simulated bench served by this test over 127.0.0.1 that stops
// answering mid-sweep (sim.Faults.ReplyDelay well above --timeout: it
// still executes commands but its answers come too late, so every
// query times out) or drops its links, and then answers again.

// hasLine reports whether a stderr line matches re now, and the first
// match's submatches.
func (r *sweepRun) hasLine(re *regexp.Regexp) []string {
	r.mu.Lock()
	defer r.mu.Unlock()
	for _, l := range r.lines {
		if m := re.FindStringSubmatch(l); m != nil {
			return m
		}
	}
	return nil
}

var (
	// point 4 of the 11-point plan has started: three are measured.
	point4RE = regexp.MustCompile(`^point 4/`)
	// The fault line names the point, the command that went unanswered
	// (instr.Session quotes it) and the timeout.
	faultRE = regexp.MustCompile(`^instrument fault at point (\d+)/11 \(.*Hz\): .*"[^"]+" on (tcp://)?127\.0\.0\.1:\d+: .*timeout`)
	lostRE  = regexp.MustCompile(`^instrument fault at point (\d+)/11 `)
	// A bench that answers nothing cannot confirm the off (the test
	// samples the simulator's output instead); a link dropped and
	// opened again can.
	waitingRE     = regexp.MustCompile(`^waiting for the instruments: output off( sent but not confirmed \(.*timeout.*\): the output may still be on)?, session saved, reconnecting for up to 1m0s \(Ctrl-C stops\)`)
	confirmedRE   = regexp.MustCompile(`^waiting for the instruments: output off, session saved, reconnecting for up to 1m0s`)
	tryFailedRE   = regexp.MustCompile(`^reconnect try (\d+) failed: .*timeout.*; next try in `)
	reconnectedRE = regexp.MustCompile(`^reconnected after .* \((\d+) tr(y|ies)\): settings applied again, resuming at point (\d+)/11 `)
)

// checkEveryPointOnce checks the session file after a run that was
// interrupted by a fault at point lostAt (1-based): the plan's 11 points
// all measured, each exactly once (one attempt, the plan's: on this
// bench no point needs a retry, as a run without a fault shows), the
// failed point's attempt begun after the instruments came back (the
// attempt cut short was not recorded), and the session complete.
func checkEveryPointOnce(t *testing.T, out string, lostAt int, back time.Time) *sweep.Session {
	t.Helper()
	s := checkSessionHolds(t, out, 11)
	if len(s.Points) != 11 || !s.Complete {
		t.Errorf("session: %d points, complete %v; want the 11 of the plan, complete", len(s.Points), s.Complete)
	}
	for i, p := range s.Points {
		if len(p.Attempts) != 1 || p.Attempts[0].Reason != "plan" {
			reasons := []string{}
			for _, a := range p.Attempts {
				reasons = append(reasons, a.Reason)
			}
			t.Errorf("point %d (%g Hz): attempts %q, want one plan attempt", i+1, p.FreqHz, reasons)
		}
	}
	if lostAt >= 1 && lostAt <= len(s.Points) && len(s.Points[lostAt-1].Attempts) > 0 {
		if a := s.Points[lostAt-1].Attempts[0]; a.Started.Before(back) {
			t.Errorf("the failed point %d's attempt started at %v, before the bench answered again at %v", lostAt, a.Started, back)
		}
	}
	return s
}

func TestReconnectEndToEnd(t *testing.T) {
	bin := buildSafetyBinary(t)
	// 300 ms per answer (--timeout), a 2 s reply delay: every query
	// during the outage times out.
	const timeout = "300ms"
	const delay = 2 * time.Second

	t.Run("stops answering, then answers again", func(t *testing.T) {
		srv := startBench(t)
		out := filepath.Join(t.TempDir(), "s.json")
		r := startSweepProc(t, bin, srv, append([]string{"--out", out, "--timeout", timeout, "--reconnect-window", "1m"}, safetyPlan...)...)
		if !r.waitLine(point4RE, 20*time.Second) {
			t.Fatalf("no progress to point 4; stderr:\n%s", r.stderr())
		}
		if !srv.OutputOn() {
			t.Fatal("output off mid-sweep before the fault: the test would prove nothing")
		}
		srv.SetFaults(sim.Faults{ReplyDelay: delay})
		if !r.waitLine(lostRE, 15*time.Second) {
			t.Fatalf("no fault reported; stderr:\n%s", r.stderr())
		}
		if r.hasLine(faultRE) == nil {
			t.Errorf("the fault line does not name the command and its timeout:\n%s", r.stderr())
		}
		lostAt, _ := strconv.Atoi(r.hasLine(lostRE)[1])
		if !r.waitLine(waitingRE, 15*time.Second) {
			t.Fatalf("no waiting line after the fault; stderr:\n%s", r.stderr())
		}
		// The output during the outage, sampled every 5 ms from the
		// waiting line (the engine has sent the off) until two
		// reconnection tries have failed.
		samples, on := 0, 0
		outage := time.Now().Add(15 * time.Second)
		for time.Now().Before(outage) {
			samples++
			if srv.OutputOn() {
				on++
			}
			if m := r.hasLine(regexp.MustCompile(`^reconnect try 2 failed`)); m != nil {
				break
			}
			time.Sleep(5 * time.Millisecond)
		}
		if r.hasLine(tryFailedRE) == nil {
			t.Fatalf("no failed reconnection try during the outage; stderr:\n%s", r.stderr())
		}
		if on > 0 {
			t.Errorf("output on in %d of %d samples during the outage", on, samples)
		}
		t.Logf("output sampled %d times during the outage, off in all", samples)
		// The bench answers again.
		srv.SetFaults(sim.Faults{})
		back := time.Now()
		if !r.waitLine(reconnectedRE, 30*time.Second) {
			t.Fatalf("no reconnection; stderr:\n%s", r.stderr())
		}
		if m := r.hasLine(reconnectedRE); m[3] != strconv.Itoa(lostAt) {
			t.Errorf("resumes at point %s, the fault hit point %d", m[3], lostAt)
		}
		if code := r.wait(t, 30*time.Second); code != 0 {
			t.Fatalf("exit %d after reconnecting, want 0; stderr:\n%s", code, r.stderr())
		}
		t.Logf("stderr:\n%s", r.stderr())
		if !outputOffSoon(srv, 0) {
			t.Error("output on after the sweep")
		}
		checkEveryPointOnce(t, out, lostAt, back)
	})

	t.Run("links dropped", func(t *testing.T) {
		srv := startBench(t)
		out := filepath.Join(t.TempDir(), "s.json")
		r := startSweepProc(t, bin, srv, append([]string{"--out", out, "--timeout", timeout, "--reconnect-window", "1m"}, safetyPlan...)...)
		if !r.waitLine(point4RE, 20*time.Second) {
			t.Fatalf("no progress to point 4; stderr:\n%s", r.stderr())
		}
		start := time.Now()
		srv.DropConnections()
		if code := r.wait(t, 30*time.Second); code != 0 {
			t.Fatalf("exit %d, want 0 (reconnected); stderr:\n%s", code, r.stderr())
		}
		t.Logf("stderr:\n%s", r.stderr())
		m := r.hasLine(lostRE)
		if m == nil || r.hasLine(reconnectedRE) == nil || r.hasLine(confirmedRE) == nil {
			t.Fatalf("no fault, confirmed off and reconnection reported; stderr:\n%s", r.stderr())
		}
		lostAt, _ := strconv.Atoi(m[1])
		if !outputOffSoon(srv, 0) {
			t.Error("output on after the sweep")
		}
		checkEveryPointOnce(t, out, lostAt, start)
	})

	t.Run("gives up", func(t *testing.T) {
		srv := startBench(t)
		out := filepath.Join(t.TempDir(), "s.json")
		r := startSweepProc(t, bin, srv, append([]string{"--out", out, "--timeout", timeout, "--reconnect-window", "2s"}, safetyPlan...)...)
		if !r.waitLine(point4RE, 20*time.Second) {
			t.Fatalf("no progress to point 4; stderr:\n%s", r.stderr())
		}
		srv.SetFaults(sim.Faults{ReplyDelay: delay})
		code := r.wait(t, 30*time.Second)
		msg := r.stderr()
		t.Logf("stderr:\n%s", msg)
		// README: 1 when the sweep fails, output off, session saved.
		if code != 1 {
			t.Errorf("exit %d after giving up, want 1", code)
		}
		for _, w := range []string{"sweep failed (output off", "gave up reconnecting after 2s", "timeout", "--resume " + out} {
			if !strings.Contains(msg, w) {
				t.Errorf("message lacks %q", w)
			}
		}
		if !outputOffSoon(srv, 3*time.Second) {
			t.Error("output on after giving up")
		}
		m := r.hasLine(lostRE)
		if m == nil {
			t.Fatal("no fault reported")
		}
		lostAt, _ := strconv.Atoi(m[1])
		// Every point before the failed one is in the file, the failed
		// one is not.
		before := checkSessionHolds(t, out, lostAt-1)
		if n := len(before.Points[lostAt-1].Attempts); n != 0 {
			t.Errorf("the failed point %d has %d attempts in the file, want 0", lostAt, n)
		}
		// The session continues on the repaired bench.
		srv.SetFaults(sim.Faults{})
		r2 := startSweepProc(t, bin, srv, "--resume", out)
		if code := r2.wait(t, 30*time.Second); code != 0 {
			t.Fatalf("--resume after giving up: exit %d; stderr:\n%s", code, r2.stderr())
		}
		after := checkEveryPointOnce(t, out, 0, time.Time{})
		sameFirstAttempts(t, before, after)
		if !outputOffSoon(srv, 0) {
			t.Error("output on after the resumed sweep")
		}
	})
}

package main

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// loopsweep scenarios --json: the documented keys for every operating
// point, null where a crossing does not exist, and the built-in margins
// in the ranges the issue asks for.
func TestScenariosJSON(t *testing.T) {
	// a loop whose gain never reaches 1: a 1 MV ramp
	dir := t.TempDir()
	weak := filepath.Join(dir, "weak.toml")
	src := `name = "weak"
[power_stage]
vin_v = 12.0
inductance_h = 10e-6
capacitance_f = 100e-6
switching_hz = 200e3
[modulator]
ramp_vpp = 1e6
[feedback]
vref_v = 1.0
r_top_ohm = 10e3
r_bottom_ohm = 10e3
[compensator]
type = "II"
r2_ohm = 10e3
c1_f = 10e-9
c2_f = 100e-12
[[operating_point]]
name = "only"
load_ohm = 2.0
`
	if err := os.WriteFile(weak, []byte(src), 0o644); err != nil {
		t.Fatal(err)
	}
	var out, errb strings.Builder
	if code := run([]string{"scenarios", "--json", weak}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var list []map[string]json.RawMessage
	if err := json.Unmarshal([]byte(out.String()), &list); err != nil {
		t.Fatal(err)
	}
	if len(list) != 5 {
		t.Fatalf("%d scenarios, want 4 built in + 1 file", len(list))
	}
	type op struct {
		Name             string   `json:"name"`
		CrossoverHz      *float64 `json:"crossover_hz"`
		PhaseMarginDeg   *float64 `json:"phase_margin_deg"`
		PhaseCrossoverHz *float64 `json:"phase_crossover_hz"`
		GainMarginDB     *float64 `json:"gain_margin_db"`
	}
	got := map[string][]op{}
	for _, sc := range list {
		for _, k := range []string{"name", "description", "operating_points"} {
			if _, ok := sc[k]; !ok {
				t.Errorf("scenario without %q: %v", k, sc)
			}
		}
		var name string
		json.Unmarshal(sc["name"], &name)
		var raw []map[string]json.RawMessage
		json.Unmarshal(sc["operating_points"], &raw)
		for _, r := range raw {
			for _, k := range []string{"name", "crossover_hz", "phase_margin_deg", "phase_crossover_hz", "gain_margin_db"} {
				if _, ok := r[k]; !ok {
					t.Errorf("%s: operating point without %q", name, k)
				}
			}
		}
		var ops []op
		json.Unmarshal(sc["operating_points"], &ops)
		got[name] = ops
	}
	if w := got["weak"]; len(w) != 1 || w[0].CrossoverHz != nil || w[0].PhaseMarginDeg != nil {
		t.Errorf("weak loop: %+v, want null crossover and phase margin", w)
	}
	if pm := got["well-compensated"][0].PhaseMarginDeg; pm == nil || *pm < 55 || *pm > 65 {
		t.Errorf("well-compensated PM %v, want 55..65", pm)
	}
	if pm := got["marginal"][0].PhaseMarginDeg; pm == nil || *pm < 15 || *pm > 25 {
		t.Errorf("marginal PM %v, want about 20", pm)
	}
	if gm := got["conditional"][0].GainMarginDB; gm == nil || *gm > 0 {
		t.Errorf("conditional worst GM %v, want negative (a crossing below crossover)", gm)
	}
	l := got["light-load-unstable"]
	if len(l) < 2 || *l[0].PhaseMarginDeg < 45 || *l[len(l)-1].PhaseMarginDeg > 0 {
		t.Errorf("light-load-unstable: %+v", l)
	}
}

func TestScenariosBadInput(t *testing.T) {
	var out, errb strings.Builder
	if code := run([]string{"scenarios", filepath.Join(t.TempDir(), "missing.toml")}, &out, &errb); code != 2 || !strings.Contains(errb.String(), "missing.toml") {
		t.Errorf("missing file: exit %d, %q", code, errb.String())
	}
}

// pipeWriter hides the pipe's other methods from run.
type pipeWriter struct{ w *io.PipeWriter }

func (p pipeWriter) Write(b []byte) (int, error) { return p.w.Write(b) }

// loopsweep sim serves until SIGTERM; the printed addresses answer
// *IDN?; a port in use and an unknown scenario or load exit 2 naming it.
func TestSimCommand(t *testing.T) {
	pr, pw := io.Pipe()
	var errb strings.Builder
	done := make(chan int, 1)
	go func() {
		done <- run([]string{"sim", "--listen", "127.0.0.1:0", "--scenario", "marginal", "--load", "light"}, pipeWriter{pw}, &errb)
		pw.Close()
	}()
	sc := bufio.NewScanner(pr)
	addrs := map[string]string{}
	for len(addrs) < 2 && sc.Scan() {
		f := strings.Fields(sc.Text())
		if len(f) == 2 {
			addrs[f[0]] = f[1]
		}
	}
	go io.Copy(io.Discard, pr)
	for _, kind := range []string{"generator", "digitizer"} {
		c, err := net.DialTimeout("tcp", addrs[kind], 5*time.Second)
		if err != nil {
			t.Fatalf("%s at %q: %v", kind, addrs[kind], err)
		}
		fmt.Fprint(c, "*IDN?\n")
		c.SetReadDeadline(time.Now().Add(5 * time.Second))
		line, err := bufio.NewReader(c).ReadString('\n')
		c.Close()
		if err != nil || strings.Count(line, ",") != 3 {
			t.Errorf("%s *IDN?: %q %v", kind, line, err)
		}
	}
	// the generator's port is now in use
	var out2, err2 strings.Builder
	if code := run([]string{"sim", "--listen", addrs["generator"]}, &out2, &err2); code != 2 || !strings.Contains(err2.String(), addrs["generator"]) {
		t.Errorf("port in use: exit %d, %q", code, err2.String())
	}
	syscall.Kill(os.Getpid(), syscall.SIGTERM)
	select {
	case code := <-done:
		if code != 0 {
			t.Errorf("sim exit %d after SIGTERM: %s", code, errb.String())
		}
	case <-time.After(10 * time.Second):
		t.Fatal("sim did not stop on SIGTERM")
	}
	for _, args := range [][]string{{"sim", "--scenario", "nope"}, {"sim", "--load", "nope"}} {
		var o, e strings.Builder
		if code := run(args, &o, &e); code != 2 || !strings.Contains(e.String(), `"nope"`) {
			t.Errorf("%v: exit %d, %q", args, code, e.String())
		}
	}
}

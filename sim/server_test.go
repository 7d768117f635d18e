package sim

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"net"
	"strconv"
	"strings"
	"testing"
	"time"
)

// client is a tiny hand-written SCPI client over TCP, independent of
// package instr.
type client struct {
	t *testing.T
	c net.Conn
	r *bufio.Reader
}

func dial(t *testing.T, addr string) *client {
	t.Helper()
	c, err := net.Dial("tcp", addr)
	if err != nil {
		t.Fatalf("dial %s: %v", addr, err)
	}
	t.Cleanup(func() { c.Close() })
	return &client{t: t, c: c, r: bufio.NewReader(c)}
}

func (c *client) send(line string) {
	c.t.Helper()
	c.c.SetDeadline(time.Now().Add(10 * time.Second))
	if _, err := io.WriteString(c.c, line+"\n"); err != nil {
		c.t.Fatalf("send %q: %v", line, err)
	}
}

func (c *client) query(line string) string {
	c.t.Helper()
	c.send(line)
	s, err := c.r.ReadString('\n')
	if err != nil {
		c.t.Fatalf("query %q: %v", line, err)
	}
	return strings.TrimRight(s, "\n")
}

func (c *client) number(line string) float64 {
	c.t.Helper()
	s := c.query(line)
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		c.t.Fatalf("query %q: reply %q is not a number", line, s)
	}
	return v
}

// block reads one definite-length block reply: #<d><count><bytes>\n.
func (c *client) block(line string) []byte {
	c.t.Helper()
	c.send(line)
	h := make([]byte, 2)
	if _, err := io.ReadFull(c.r, h); err != nil {
		c.t.Fatalf("%s: block header: %v", line, err)
	}
	if h[0] != '#' || h[1] < '1' || h[1] > '9' {
		c.t.Fatalf("%s: block header %q", line, h)
	}
	cnt := make([]byte, h[1]-'0')
	if _, err := io.ReadFull(c.r, cnt); err != nil {
		c.t.Fatalf("%s: block count: %v", line, err)
	}
	n, err := strconv.Atoi(string(cnt))
	if err != nil {
		c.t.Fatalf("%s: block count %q", line, cnt)
	}
	body := make([]byte, n+1)
	if _, err := io.ReadFull(c.r, body); err != nil {
		c.t.Fatalf("%s: block body: %v", line, err)
	}
	if body[n] != '\n' {
		c.t.Fatalf("%s: block not terminated by newline", line)
	}
	return body[:n]
}

func startServer(t *testing.T, opt Options) *Server {
	t.Helper()
	s, err := Start(opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// The command set of the generic profiles, with short and long forms,
// optional nodes, several commands per line and the error queue; the
// expected strings are SCPI-1999 / IEEE 488.2 (memory, REFERENCES.md).
func TestGeneratorCommands(t *testing.T) {
	s := startServer(t, Options{})
	g := dial(t, s.GenAddr())
	if idn := g.query("*IDN?"); strings.Count(idn, ",") != 3 {
		t.Errorf("*IDN? %q: want 4 comma-separated fields (IEEE 488.2)", idn)
	}
	cases := []struct{ send, query, want string }{
		{"SOURce1:FREQuency 2500", "SOUR1:FREQ?", "2500"},
		{"FREQ 1e3", "SOURCE:FREQUENCY?", "1000"},
		{"sour:freq:cw 12.5", "freq?", "12.5"},
		{"SOURce1:VOLTage 0.05", "SOUR:VOLT:LEV:IMM:AMPL?", "0.05"},
		{"SOUR1:VOLT:OFFS 0.1", "SOURce1:VOLTage:OFFSet?", "0.1"},
		{"SOUR1:VOLT:OFFS 0", "VOLT:OFFS?", "0"},
		{"SOURce1:FUNCtion:SHAPe SINusoid", "FUNC?", "SIN"},
		{"OUTPut1:STATe ON", "OUTP1:STAT?", "1"},
		{"OUTP OFF", "OUTPut1?", "0"},
		{"OUTP 1", "OUTP?", "1"},
		{"OUTP 0", "OUTP?", "0"},
	}
	for _, c := range cases {
		g.send(c.send)
		if got := g.query(c.query); got != c.want {
			t.Errorf("%s then %s: %q, want %q", c.send, c.query, got, c.want)
		}
	}
	if got := g.query("SYST:ERR?"); got != `0,"No error"` {
		t.Errorf("error queue after valid commands: %q", got)
	}
	// several commands and queries on one line, replies joined by ';'
	if got := g.query("FREQ 300;:FREQ?;OUTP?"); got != "300;0" {
		t.Errorf("compound line: %q, want %q", got, "300;0")
	}
	g.send("FREQ 3e9")      // above MaxFreqHz: -222
	g.send("BOGUS:THING 1") // -113
	g.send("IDN?")          // -113: a common command needs its '*' (sent as a query: no reply)
	g.send("SYST:ERR?")
	g.send("OUTP1:STAT MAYBE") // -224
	if got, _ := g.r.ReadString('\n'); got != "-222,\"Data out of range\"\n" {
		t.Errorf("first error %q", got)
	}
	for _, want := range []string{`-113,"Undefined header"`, `-113,"Undefined header"`, `-224,"Illegal parameter value"`, `0,"No error"`} {
		if got := g.query("SYSTem:ERRor:NEXT?"); got != want {
			t.Errorf("SYST:ERR? %q, want %q", got, want)
		}
	}
	if got := g.query("FREQ?"); got != "300" {
		t.Errorf("a rejected setting changed the frequency: %q", got)
	}
	// digitizer commands are undefined on the generator
	g.send("SENS:SWE:POIN 100")
	if got := g.query("SYST:ERR?"); got != `-113,"Undefined header"` {
		t.Errorf("digitizer command on generator: %q", got)
	}
	g.send("OUTP ON")
	g.query("*OPC?")
	if !s.OutputOn() {
		t.Error("OutputOn false after OUTP ON")
	}
	g.send("*RST")
	if g.query("*OPC?") != "1" || s.OutputOn() {
		t.Error("*RST did not turn the output off")
	}
	g.send("BAD")
	g.send("*CLS")
	if got := g.query("SYST:ERR?"); got != `0,"No error"` {
		t.Errorf("*CLS left %q", got)
	}
}

func TestDigitizerSettingsReadBack(t *testing.T) {
	s := startServer(t, Options{})
	d := dial(t, s.DigAddr())
	// 1-2-5 rounding: the interval to the nearest step in log, the range
	// up to the next step.
	cases := []struct {
		send, query string
		want        float64
	}{
		{"SENS:SWE:TINT 1.3e-6", "SENS:SWE:TINT?", 1e-6},
		{"SENSe:SWEep:TINTerval 1.5e-6", "SENSe:SWEep:TINTerval?", 2e-6},
		{"SWE:TINT 2.5e-7", "SWE:TINT?", 2e-7},
		{"SWE:TINT 3.3e-7", "SWE:TINT?", 5e-7}, // |ln(3.3/5)| < |ln(3.3/2)|
		{"SWE:TINT 4e-7", "SWE:TINT?", 5e-7},
		{"SENS1:VOLT:RANG 0.15", "SENS1:VOLT:RANG?", 0.2},
		{"SENSe2:VOLTage:RANGe 0.2", "SENSe2:VOLTage:RANGe?", 0.2},
		{"SENS2:VOLT:RANG 0.21", "SENS2:VOLT:RANG?", 0.5},
		{"SENS1:VOLT:OFFS 3.3", "SENS1:VOLT:OFFS?", 3.3},
		{"SENS:SWE:POIN 12345", "SENS:SWE:POIN?", 12345},
		{"", "SENS:SWE:POIN? MAX", MaxPoints},
	}
	for _, c := range cases {
		if c.send != "" {
			d.send(c.send)
		}
		if got := d.number(c.query); math.Abs(got-c.want) > 1e-12*c.want {
			t.Errorf("%s: %s = %g, want %g", c.send, c.query, got, c.want)
		}
	}
	d.send("SENS:SWE:POIN 5e6")
	d.send("SENS3:VOLT:RANG 1")
	d.send("FORM:DATA REAL,64")
	for _, want := range []string{`-222,"Data out of range"`, `-114,"Header suffix out of range"`, `-224,"Illegal parameter value"`} {
		if got := d.query("SYST:ERR?"); got != want {
			t.Errorf("SYST:ERR? %q, want %q", got, want)
		}
	}
	// compound commands: OFFS is looked up under SENS2:VOLT: first
	// (SCPI-1999 relative path), RANG? likewise; ":SENS1..." is absolute
	if got := d.query("SENS2:VOLT:RANG 0.5;OFFS 1.25;RANG?;OFFS?;:SENS1:VOLT:OFFS?"); got != "0.5;1.25;3.3" {
		t.Errorf("compound with relative paths: %q, want %q", got, "0.5;1.25;3.3")
	}
	d.send("INP1:COUP AC")
	if got := d.query("INPut1:COUPling?"); got != "AC" {
		t.Errorf("coupling %q", got)
	}
	d.send("FORM INT,16;FORM:BORD SWAP")
	if got := d.query("FORM?;FORM:BORD?"); got != "INT,16;SWAP" {
		t.Errorf("format %q", got)
	}
}

// An acquisition takes real time: *OPC? answers no sooner than points ×
// interval after INITiate.
func TestAcquisitionTakesRealTime(t *testing.T) {
	s := startServer(t, Options{})
	d := dial(t, s.DigAddr())
	d.send("SENS:SWE:POIN 100000;:SENS:SWE:TINT 1e-6") // 100 ms
	t0 := time.Now()
	d.send("INIT")
	if d.query("*OPC?") != "1" {
		t.Fatal("*OPC? not 1")
	}
	if el := time.Since(t0); el < 95*time.Millisecond {
		t.Errorf("acquisition of 100 ms finished after %v", el)
	}
}

// Every data format decodes to the same volts within one ADC step.
func TestDataFormats(t *testing.T) {
	s := startServer(t, Options{Seed: 1})
	g := dial(t, s.GenAddr())
	d := dial(t, s.DigAddr())
	g.send("FREQ 1000;VOLT 0.1;OUTP ON")
	d.send("SENS:SWE:POIN 2000;:SENS:SWE:TINT 1e-6;:SENS1:VOLT:RANG 0.2;:SENS2:VOLT:RANG 0.2")
	vout := s.Scenario().VoutV()
	d.send(fmt.Sprintf("SENS1:VOLT:OFFS %g;:SENS2:VOLT:OFFS %g", vout, vout))
	d.send("INIT")
	d.query("*OPC?")
	decode := map[string][]float64{}
	for _, f := range []string{"REAL,32", "INT,16", "INT,8", "ASC"} {
		for _, bo := range []string{"NORM", "SWAP"} {
			d.send("FORM " + f + ";:FORM:BORD " + bo)
			var v []float64
			switch f {
			case "ASC":
				for _, x := range strings.Split(d.query("TRAC:DATA? CH2"), ",") {
					y, err := strconv.ParseFloat(x, 64)
					if err != nil {
						t.Fatal(err)
					}
					v = append(v, y)
				}
			default:
				b := d.block("TRACe:DATA? CH2")
				var order binary.ByteOrder = binary.BigEndian
				if bo == "SWAP" {
					order = binary.LittleEndian
				}
				scale, off := d.number("TRAC:SCAL? CH2"), d.number("TRAC:OFFS? CH2")
				switch f {
				case "REAL,32":
					for i := 0; i+4 <= len(b); i += 4 {
						v = append(v, float64(math.Float32frombits(order.Uint32(b[i:]))))
					}
				case "INT,16":
					for i := 0; i+2 <= len(b); i += 2 {
						v = append(v, float64(int16(order.Uint16(b[i:])))*scale+off)
					}
				case "INT,8":
					for _, c := range b {
						v = append(v, float64(int8(c))*scale+off)
					}
				}
			}
			if len(v) != 2000 {
				t.Fatalf("%s %s: %d samples, want 2000", f, bo, len(v))
			}
			decode[f+" "+bo] = v
		}
	}
	ref := decode["REAL,32 NORM"]
	// INT,8 drops the 4 low bits of the 12-bit codes: off by less than one
	// 8-bit step of 0.2/128 V; the others carry the codes exactly.
	for k, v := range decode {
		tol := 0.2/2048 + 1e-6
		if strings.HasPrefix(k, "INT,8") {
			tol = 0.2 / 128
		}
		for i := range v {
			if math.Abs(v[i]-ref[i]) > tol {
				t.Errorf("%s sample %d: %g V, REAL,32 says %g V", k, i, v[i], ref[i])
				break
			}
		}
	}
}

func TestStartErrors(t *testing.T) {
	s := startServer(t, Options{})
	_, port, _ := net.SplitHostPort(s.GenAddr())
	_, err := Start(Options{Listen: "127.0.0.1:" + port})
	if err == nil || !strings.Contains(err.Error(), "127.0.0.1:"+port) {
		t.Errorf("port in use: %v, want an error naming the address", err)
	}
	if _, err := Start(Options{Scenario: "no-such"}); err == nil || !strings.Contains(err.Error(), "no-such") {
		t.Errorf("unknown scenario: %v", err)
	}
	if _, err := Start(Options{Load: "nonexistent"}); err == nil || !strings.Contains(err.Error(), "nonexistent") {
		t.Errorf("unknown load: %v", err)
	}
}

func TestFaults(t *testing.T) {
	s := startServer(t, Options{})
	d := dial(t, s.DigAddr())
	d.send("SENS:SWE:POIN 100;INIT")
	d.query("*OPC?")
	s.SetFaults(Faults{CorruptBlocks: 1})
	d.send("TRAC:DATA? CH1")
	h := make([]byte, 2)
	io.ReadFull(d.r, h)
	if h[0] != '#' || h[1] >= '0' && h[1] <= '9' {
		t.Errorf("corrupted block header starts %q", h)
	}
	d.r.ReadString('\n')
	if got := s.Faults().CorruptBlocks; got != 0 {
		t.Errorf("CorruptBlocks after firing: %d", got)
	}
	b := d.block("TRAC:DATA? CH1")
	if len(b) != 400 {
		t.Errorf("block after the fault: %d bytes", len(b))
	}
	s.PushError(false, -350, "Queue overflow")
	if got := d.query("SYST:ERR?"); got != `-350,"Queue overflow"` {
		t.Errorf("pushed error: %q", got)
	}
	g := dial(t, s.GenAddr())
	g.send("OUTP ON")
	g.query("*OPC?")
	s.SetFaults(Faults{DropAfter: 1})
	g.send("FREQ?")
	g.c.SetReadDeadline(time.Now().Add(2 * time.Second))
	if _, err := g.r.ReadString('\n'); err == nil {
		t.Error("connection not dropped")
	}
	if !s.OutputOn() {
		t.Error("a dropped link turned the output off; a real generator keeps it on")
	}
}

// Close does not wait for a long acquisition that a client is waiting on.
func TestCloseDuringLongAcquisition(t *testing.T) {
	s, err := Start(Options{})
	if err != nil {
		t.Fatal(err)
	}
	d := dial(t, s.DigAddr())
	d.send("SENS:SWE:POIN 1000000;:SENS:SWE:TINT 1e-3;:INIT;*OPC?") // 1000 s
	time.Sleep(50 * time.Millisecond)
	t0 := time.Now()
	s.Close()
	if el := time.Since(t0); el > 2*time.Second {
		t.Errorf("Close took %v", el)
	}
}

func TestTruncateDelayAndSetLoad(t *testing.T) {
	s := startServer(t, Options{})
	d := dial(t, s.DigAddr())
	d.send("SENS:SWE:POIN 1000;INIT")
	d.query("*OPC?")
	s.SetFaults(Faults{TruncateBlocks: 1})
	d.send("TRAC:DATA? CH1")
	hdr := make([]byte, 6)
	io.ReadFull(d.r, hdr)
	if string(hdr) != "#44000" {
		t.Fatalf("header %q, want #44000", hdr)
	}
	d.c.SetReadDeadline(time.Now().Add(300 * time.Millisecond))
	n, _ := io.ReadFull(d.r, make([]byte, 4001))
	if n >= 4000 {
		t.Errorf("truncated block delivered %d of 4000 bytes", n)
	}

	g := dial(t, s.GenAddr())
	s.SetFaults(Faults{ReplyDelay: 150 * time.Millisecond})
	t0 := time.Now()
	g.query("*IDN?")
	if el := time.Since(t0); el < 150*time.Millisecond {
		t.Errorf("reply after %v, want the 150 ms delay", el)
	}
	s.SetFaults(Faults{})

	if err := s.SetLoad("light"); err != nil || s.Load() != "light" {
		t.Errorf("SetLoad light: %v, load %s", err, s.Load())
	}
	if err := s.SetLoad("overload"); err == nil || !strings.Contains(err.Error(), `"overload"`) {
		t.Errorf("SetLoad overload: %v", err)
	}
}

package sim

import (
	"bufio"
	"errors"
	"fmt"
	"net"
	"strconv"
	"sync"
	"time"
)

// Options configure Start. The zero value serves the default scenario at
// its first operating point on two free loopback ports.
type Options struct {
	// Listen is the generator's address; the digitizer listens on the
	// next port. With port 0 (the default "127.0.0.1:0") both get free
	// ports.
	Listen string
	// Scenario is a built-in scenario name or a TOML file path; "" is
	// the default scenario. Ignored when Model is set.
	Scenario string
	// Model is an already loaded scenario (see LoadScenario).
	Model *Scenario
	// Load is the operating point; "" is the scenario's first.
	Load string
	// Seed seeds the noise; runs with the same seed and the same command
	// timing give the same noise.
	Seed int64
	// Faults are injected from the start; see Server.SetFaults.
	Faults Faults
}

// Faults are deliberate misbehaviours for testing clients. Counters count
// down as they fire; the zero value is a well-behaved bench.
type Faults struct {
	// ReplyDelay delays every reply by this long.
	ReplyDelay time.Duration
	// DropAfter closes the connection that receives the DropAfter-th
	// command from now (on either instrument) instead of executing it;
	// 0 never drops. The generator keeps its output state, as a real
	// one does when its cable is pulled.
	DropAfter int
	// CorruptBlocks: the next n data blocks are sent with a malformed
	// IEEE 488.2 header (a letter in place of the digit count).
	CorruptBlocks int
	// TruncateBlocks: the next n data blocks stop after half their bytes,
	// with no terminator.
	TruncateBlocks int
}

// Instrument limits of the simulated bench.
const (
	MaxPoints     = 4_000_000 // record length per channel
	MinIntervalS  = 10e-9     // 100 MS/s
	MaxIntervalS  = 1.0
	MinRangeV     = 1e-3 // window offset ± range, 1-2-5 sequence
	MaxRangeV     = 50
	MaxOffsetV    = 100
	MinFreqHz     = 1e-3
	MaxFreqHz     = 20e6
	MinVpp        = 1e-3
	MaxVpp        = 10
	MaxGenOffsetV = 5
	maxErrors     = 32
	maxLine       = 1 << 16
)

// Identification strings (an invented maker).
const (
	genIDN = "Quillmere Bench Works,QG-20 simulated generator,SIM0001,1.0"
	digIDN = "Quillmere Bench Works,QD-2 simulated digitizer,SIM0002,1.0"
)

// Server is the running simulated bench.
type Server struct {
	epoch time.Time

	mu     sync.Mutex
	sc     *Scenario
	op     OperatingPoint
	b      *bench
	gen    genState
	dig    digState
	genQ   []scpiError
	digQ   []scpiError
	faults Faults
	conns  map[net.Conn]bool
	closed bool

	gl, dl net.Listener
	wg     sync.WaitGroup
	quit   chan struct{} // closed by Close: ends waits for acquisitions
}

type genState struct {
	on               bool
	freqHz, vpp, off float64
}

type digState struct {
	points    int
	intervalS float64
	ch        [2]chanSetup
	format    string // "REAL,32", "INT,16", "INT,8", "ASC"
	swapped   bool
	acq       *acquisition
}

// acquisition is one started record; data are generated in the
// background while the acquisition's real time passes.
type acquisition struct {
	done   chan struct{}
	end    time.Time
	c1, c2 []int16
	setup  [2]chanSetup
	// both channels encoded in the format and byte order in force at
	// INITiate, ready for the fetch while the acquisition time passes
	format  string
	swapped bool
	enc     [2]result
}

type scpiError struct {
	code int
	text string
}

func (e scpiError) String() string { return fmt.Sprintf("%d,%q", e.code, e.text) }

var (
	errUndefined   = scpiError{-113, "Undefined header"}
	errSuffix      = scpiError{-114, "Header suffix out of range"}
	errDataType    = scpiError{-104, "Data type error"}
	errParamNotAll = scpiError{-108, "Parameter not allowed"}
	errMissing     = scpiError{-109, "Missing parameter"}
	errRange       = scpiError{-222, "Data out of range"}
	errIllegal     = scpiError{-224, "Illegal parameter value"}
	errStale       = scpiError{-230, "Data corrupt or stale"}
	errOverflow    = scpiError{-350, "Queue overflow"}
)

// Start loads the scenario, opens both listeners and serves until Close.
func Start(opt Options) (*Server, error) {
	sc := opt.Model
	if sc == nil {
		var err error
		if sc, err = LoadScenario(opt.Scenario); err != nil {
			return nil, err
		}
	}
	op, err := sc.point(opt.Load)
	if err != nil {
		return nil, err
	}
	addr := opt.Listen
	if addr == "" {
		addr = "127.0.0.1:0"
	}
	host, portStr, err := net.SplitHostPort(addr)
	if err != nil {
		return nil, fmt.Errorf("listen address %q: %w", addr, err)
	}
	port, err := strconv.Atoi(portStr)
	if err != nil || port < 0 || port > 65534 {
		return nil, fmt.Errorf("listen address %q: port %q is not 0 to 65534", addr, portStr)
	}
	gl, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("generator listen %s: %w", addr, err)
	}
	daddr := net.JoinHostPort(host, "0")
	if port != 0 {
		daddr = net.JoinHostPort(host, strconv.Itoa(port+1))
	}
	dl, err := net.Listen("tcp", daddr)
	if err != nil {
		gl.Close()
		return nil, fmt.Errorf("digitizer listen %s: %w", daddr, err)
	}
	s := newServer(sc, op, opt)
	s.gl, s.dl = gl, dl
	s.wg.Add(2)
	go s.accept(gl, true)
	go s.accept(dl, false)
	return s, nil
}

// newServer is the instruments' state without listeners.
func newServer(sc *Scenario, op OperatingPoint, opt Options) *Server {
	s := &Server{epoch: time.Now(), sc: sc, op: op, faults: opt.Faults, conns: map[net.Conn]bool{}, quit: make(chan struct{})}
	s.b = newBench(sc, op, opt.Seed)
	s.resetGen()
	s.resetDig()
	return s
}

// GenAddr is the generator's address, "127.0.0.1:PORT".
func (s *Server) GenAddr() string { return s.gl.Addr().String() }

// DigAddr is the digitizer's address.
func (s *Server) DigAddr() string { return s.dl.Addr().String() }

// Scenario is the scenario being served.
func (s *Server) Scenario() *Scenario { return s.sc }

// Load is the current operating point's name.
func (s *Server) Load() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.op.Name
}

// OutputOn reports the generator's output state.
func (s *Server) OutputOn() bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.gen.on
}

// SetLoad moves the converter to another operating point; the output
// settles from where it was.
func (s *Server) SetLoad(name string) error {
	op, err := s.sc.point(name)
	if err != nil {
		return err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	s.op = op
	s.b.setPoint(s.sc, op, s.now())
	return nil
}

// SetFaults replaces the injected faults.
func (s *Server) SetFaults(f Faults) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.faults = f
}

// Faults returns the faults still pending.
func (s *Server) Faults() Faults {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.faults
}

// PushError puts an instrument error onto the error queue of the
// generator (generator true) or the digitizer, as if the instrument had
// reported it.
func (s *Server) PushError(generator bool, code int, text string) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.push(generator, scpiError{code, text})
}

// DropConnections closes every open client connection now; the
// listeners stay open.
func (s *Server) DropConnections() {
	s.mu.Lock()
	defer s.mu.Unlock()
	for c := range s.conns {
		c.Close()
	}
}

// Close stops both listeners, closes every connection and waits for the
// handlers to finish.
func (s *Server) Close() error {
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return nil
	}
	s.closed = true
	close(s.quit)
	for c := range s.conns {
		c.Close()
	}
	s.mu.Unlock()
	s.gl.Close()
	s.dl.Close()
	s.wg.Wait()
	return nil
}

func (s *Server) now() float64 { return time.Since(s.epoch).Seconds() }

// waitAcquisition waits until a's record is generated and its real
// acquisition time is over; false if the server closed first.
func (s *Server) waitAcquisition(a *acquisition) bool {
	select {
	case <-a.done:
	case <-s.quit:
		return false
	}
	return sleepUntil(a.end, s.quit)
}

func (s *Server) push(gen bool, e scpiError) {
	q := &s.digQ
	if gen {
		q = &s.genQ
	}
	if len(*q) >= maxErrors {
		(*q)[maxErrors-1] = errOverflow
		return
	}
	*q = append(*q, e)
}

func (s *Server) accept(l net.Listener, gen bool) {
	defer s.wg.Done()
	for {
		c, err := l.Accept()
		if err != nil {
			return
		}
		s.mu.Lock()
		if s.closed {
			s.mu.Unlock()
			c.Close()
			return
		}
		s.conns[c] = true
		s.wg.Add(1)
		s.mu.Unlock()
		go s.serve(c, gen)
	}
}

// serve reads lines and answers them until the client goes away.
func (s *Server) serve(c net.Conn, gen bool) {
	defer s.wg.Done()
	defer func() {
		c.Close()
		s.mu.Lock()
		delete(s.conns, c)
		s.mu.Unlock()
	}()
	r := bufio.NewReaderSize(c, 4096)
	w := bufio.NewWriterSize(c, 1<<16)
	for {
		line, err := readLine(r)
		if err != nil {
			return
		}
		var reply []byte
		var path []string
		blockAt := -1
		drop := false
		for _, part := range splitCommands(line) {
			if !s.countCommand() {
				drop = true
				break
			}
			out, isBlock, ok := s.executeIn(part, gen, &path)
			if !ok {
				continue
			}
			if len(reply) > 0 {
				reply = append(reply, ';')
			}
			if isBlock {
				blockAt = len(reply)
			}
			reply = append(reply, out...)
		}
		if drop {
			return
		}
		if reply == nil {
			continue
		}
		if d := s.Faults().ReplyDelay; d > 0 {
			time.Sleep(d)
		}
		reply = s.mangleBlock(reply, blockAt)
		if _, err := w.Write(reply); err != nil {
			return
		}
		if err := w.Flush(); err != nil {
			return
		}
	}
}

var errLineTooLong = errors.New("line too long")

// readLine reads up to '\n' (dropping a '\r' before it), refusing lines
// over maxLine bytes.
func readLine(r *bufio.Reader) (string, error) {
	var buf []byte
	for {
		chunk, err := r.ReadSlice('\n')
		buf = append(buf, chunk...)
		if len(buf) > maxLine {
			return "", errLineTooLong
		}
		if err == bufio.ErrBufferFull {
			continue
		}
		if err != nil {
			return "", err
		}
		break
	}
	buf = buf[:len(buf)-1]
	if n := len(buf); n > 0 && buf[n-1] == '\r' {
		buf = buf[:n-1]
	}
	return string(buf), nil
}

// countCommand counts one command against DropAfter; false means drop
// the connection now.
func (s *Server) countCommand() bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.faults.DropAfter <= 0 {
		return true
	}
	s.faults.DropAfter--
	return s.faults.DropAfter > 0
}

// mangleBlock applies the block faults to a reply holding a block at
// index i (−1 for none), and ends the reply with '\n' (a truncated block
// gets none).
func (s *Server) mangleBlock(reply []byte, i int) []byte {
	if i < 0 {
		return append(reply, '\n')
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	switch {
	case s.faults.CorruptBlocks > 0:
		s.faults.CorruptBlocks--
		reply[i+1] = 'Z'
	case s.faults.TruncateBlocks > 0:
		s.faults.TruncateBlocks--
		return reply[:i+(len(reply)-i)/2]
	}
	return append(reply, '\n')
}

package sim

import (
	"encoding/binary"
	"math"
	"runtime"
	"strconv"
	"strings"
	"sync"
	"time"
)

// result is what one command produces.
type result struct {
	reply []byte
	block bool
	err   *scpiError
}

// handler runs one command with s.mu held, with the numeric suffixes of
// the header's suffixed nodes.
type handler func(s *Server, c command, sfx []int) result

// entry is one header of a command table: its setting and its query
// (nil when the instrument has none).
type entry struct {
	pat      pattern
	set, get handler
}

func mk(p string, set, get handler) entry { return entry{pat: compilePattern(p), set: set, get: get} }

var commonTable = []entry{
	mk("*RST", func(s *Server, c command, _ []int) result { return s.reset(c) }, nil),
	mk("*CLS", func(s *Server, c command, _ []int) result { return s.clearStatus(c) }, nil),
	mk("*WAI", func(s *Server, c command, _ []int) result { return result{} }, nil),
	mk("*OPC", func(s *Server, c command, _ []int) result { return result{} }, nil),
	mk("*STB", nil, func(s *Server, c command, _ []int) result { return text("0") }),
	mk("*ESR", nil, func(s *Server, c command, _ []int) result { return text("0") }),
	mk("SYSTem:ERRor[:NEXT]", nil, func(s *Server, c command, _ []int) result { return s.nextError(c) }),
}

var genTable = []entry{
	mk("*IDN", nil, func(*Server, command, []int) result { return text(genIDN) }),
	mk("[SOURce#]:FUNCtion[:SHAPe]", genShape, func(*Server, command, []int) result { return text("SIN") }),
	mk("[SOURce#]:FREQuency[:CW]", genFreq, func(s *Server, _ command, _ []int) result { return num(s.gen.freqHz) }),
	mk("[SOURce#]:VOLTage[:LEVel][:IMMediate][:AMPLitude]", genVolt, func(s *Server, _ command, _ []int) result { return num(s.gen.vpp) }),
	mk("[SOURce#]:VOLTage[:LEVel][:IMMediate]:OFFSet", genOffset, func(s *Server, _ command, _ []int) result { return num(s.gen.off) }),
	mk("OUTPut#[:STATe]", genOutput, func(s *Server, _ command, _ []int) result { return text(onOff(s.gen.on)) }),
}

var digTable = []entry{
	mk("*IDN", nil, func(*Server, command, []int) result { return text(digIDN) }),
	mk("[SENSe#]:SWEep:POINts", digPoints, digPointsQuery),
	mk("[SENSe#]:SWEep:TINTerval", digInterval, func(s *Server, _ command, _ []int) result { return num(s.dig.intervalS) }),
	mk("SENSe#:VOLTage[:DC]:RANGe[:UPPer]", digRange, chanQuery(func(c chanSetup) string { return fmtNum(c.rangeV) })),
	mk("SENSe#:VOLTage[:DC]:OFFSet", digOffset, chanQuery(func(c chanSetup) string { return fmtNum(c.offsetV) })),
	mk("INPut#:COUPling", digCoupling, chanQuery(func(c chanSetup) string {
		if c.ac {
			return "AC"
		}
		return "DC"
	})),
	mk("INITiate[:IMMediate]", digInit, nil),
	mk("FORMat[:DATA]", digFormat, func(s *Server, _ command, _ []int) result { return text(s.dig.format) }),
	mk("FORMat:BORDer", digBorder, func(s *Server, _ command, _ []int) result {
		if s.dig.swapped {
			return text("SWAP")
		}
		return text("NORM")
	}),
	mk("TRACe:SCALe", nil, digScale),
	mk("TRACe:OFFSet", nil, digTraceOffset),
}

// Queries that wait for an acquisition's real time: run without s.mu
// held (they lock for themselves), looked up before the tables above.
var opcEntry = entry{pat: compilePattern("*OPC")}
var traceEntry = entry{pat: compilePattern("TRACe[:DATA]")}

func text(s string) result    { return result{reply: []byte(s)} }
func num(v float64) result    { return text(fmtNum(v)) }
func fail(e scpiError) result { return result{err: &e} }
func fmtNum(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
func onOff(on bool) string    { return map[bool]string{true: "1", false: "0"}[on] }

// matchWord matches a character-data parameter against a mnemonic with
// its short form in capitals ("SINusoid" accepts SIN and SINUSOID).
func matchWord(a, long string) bool {
	short := ""
	for _, r := range long {
		if r >= 'A' && r <= 'Z' {
			short += string(r)
		}
	}
	a = strings.ToUpper(a)
	return a == short || a == strings.ToUpper(long)
}

// execute runs one command for the generator (gen) or digitizer. ok is
// false when there is nothing to send (a setting, or an error queued).
func (s *Server) execute(part string, gen bool) (out []byte, block, ok bool) {
	return s.executeIn(part, gen, nil)
}

// executeIn is execute with the SCPI-1999 compound-command rule: a
// command after ';' without a leading ':' is first looked up under the
// previous command's path (all but its last node), then from the root.
// *path is updated for the next command (common commands leave it).
func (s *Server) executeIn(part string, gen bool, path *[]string) (out []byte, block, ok bool) {
	c, valid := parseCommand(part)
	c.gen = gen
	if !valid {
		if strings.TrimSpace(part) != "" {
			s.mu.Lock()
			s.push(gen, errUndefined)
			s.mu.Unlock()
		}
		return nil, false, false
	}
	if path != nil && !c.common {
		if len(*path) > 0 && !strings.HasPrefix(strings.TrimSpace(part), ":") {
			rel := c
			rel.nodes = append(append([]string(nil), *path...), c.nodes...)
			if known(rel, gen) {
				c = rel
			}
		}
		*path = append((*path)[:0], c.nodes[:len(c.nodes)-1]...)
	}
	var r result
	switch {
	case c.query && matches(opcEntry, c):
		r = s.opc(gen)
	case c.query && !gen && matches(traceEntry, c):
		r = s.traceData(c)
	default:
		r = s.dispatch(c, gen)
	}
	if r.err != nil {
		s.mu.Lock()
		s.push(gen, *r.err)
		s.mu.Unlock()
		return nil, false, false
	}
	if !c.query {
		return nil, false, false
	}
	return r.reply, r.block, true
}

// known reports whether c's header names a command of the instrument.
func known(c command, gen bool) bool {
	if matches(opcEntry, c) || (!gen && matches(traceEntry, c)) {
		return true
	}
	tables := [][]entry{commonTable, digTable}
	if gen {
		tables[1] = genTable
	}
	for _, t := range tables {
		for _, e := range t {
			if matches(e, c) {
				return true
			}
		}
	}
	return false
}

func matches(e entry, c command) bool {
	_, ok := e.pat.match(c.nodes)
	return ok
}

func (s *Server) dispatch(c command, gen bool) result {
	tables := [][]entry{commonTable, digTable}
	if gen {
		tables[1] = genTable
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, t := range tables {
		for _, e := range t {
			sfx, ok := e.pat.match(c.nodes)
			if !ok {
				continue
			}
			h := e.set
			if c.query {
				h = e.get
			}
			if h == nil {
				return fail(errUndefined)
			}
			if !c.query && len(c.args) == 0 && e.set != nil && needsArg(e) {
				return fail(errMissing)
			}
			return h(s, c, sfx)
		}
	}
	return fail(errUndefined)
}

// needsArg: every setting except the argument-free ones.
func needsArg(e entry) bool {
	switch e.pat[0].long {
	case "*RST", "*CLS", "*WAI", "*OPC", "INITIATE":
		return false
	}
	return true
}

// reset (*RST) returns the addressed instrument to its power-on
// settings: the generator's output goes off; the digitizer forgets its
// record. The error queue is kept (IEEE 488.2: *RST does not clear it).
func (s *Server) reset(c command) result {
	if c.gen {
		s.resetGen()
	} else {
		s.resetDig()
	}
	return result{}
}

// clearStatus (*CLS) empties the addressed instrument's error queue.
func (s *Server) clearStatus(c command) result {
	if c.gen {
		s.genQ = nil
	} else {
		s.digQ = nil
	}
	return result{}
}

func (s *Server) resetGen() {
	s.gen = genState{on: false, freqHz: 1e3, vpp: 0.1, off: 0}
	s.applyGen()
}

func (s *Server) resetDig() {
	bits := s.sc.Meas.ADCBits
	s.dig = digState{points: 1000, intervalS: 1e-6, format: "REAL,32"}
	for i := range s.dig.ch {
		s.dig.ch[i] = chanSetup{rangeV: 1, bits: bits}
	}
}

func (s *Server) applyGen() {
	g := s.gen
	s.b.setGenerator(s.now(), g.on, g.freqHz, g.vpp/2, g.off)
}

// nextError (SYSTem:ERRor[:NEXT]?) pops the oldest error, or answers
// 0,"No error".
func (s *Server) nextError(c command) result {
	q := &s.digQ
	if c.gen {
		q = &s.genQ
	}
	if len(*q) == 0 {
		return text(`0,"No error"`)
	}
	e := (*q)[0]
	*q = (*q)[1:]
	return text(e.String())
}

// parseNumber parses a decimal number or MINimum/MAXimum.
func parseNumber(c command, min, max float64) (float64, *scpiError) {
	if len(c.args) == 0 {
		return 0, &errMissing
	}
	if len(c.args) > 1 {
		return 0, &errParamNotAll
	}
	a := c.args[0]
	switch {
	case matchWord(a, "MINimum"):
		return min, nil
	case matchWord(a, "MAXimum"):
		return max, nil
	}
	v, err := strconv.ParseFloat(a, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, &errDataType
	}
	return v, nil
}

func setNumber(c command, min, max float64, apply func(float64)) result {
	v, e := parseNumber(c, min, max)
	if e != nil {
		return fail(*e)
	}
	if v < min || v > max {
		return fail(errRange)
	}
	apply(v)
	return result{}
}

func genShape(s *Server, c command, _ []int) result {
	if len(c.args) != 1 {
		return fail(errParamNotAll)
	}
	if !matchWord(c.args[0], "SINusoid") {
		return fail(errIllegal)
	}
	return result{}
}

func genFreq(s *Server, c command, sfx []int) result {
	if sfx[0] != 1 {
		return fail(errSuffix)
	}
	return setNumber(c, MinFreqHz, MaxFreqHz, func(v float64) { s.gen.freqHz = v; s.applyGen() })
}

func genVolt(s *Server, c command, sfx []int) result {
	if sfx[0] != 1 {
		return fail(errSuffix)
	}
	return setNumber(c, MinVpp, MaxVpp, func(v float64) { s.gen.vpp = v; s.applyGen() })
}

func genOffset(s *Server, c command, sfx []int) result {
	if sfx[0] != 1 {
		return fail(errSuffix)
	}
	return setNumber(c, -MaxGenOffsetV, MaxGenOffsetV, func(v float64) { s.gen.off = v; s.applyGen() })
}

func genOutput(s *Server, c command, sfx []int) result {
	if sfx[0] != 1 {
		return fail(errSuffix)
	}
	if len(c.args) != 1 {
		return fail(errParamNotAll)
	}
	switch strings.ToUpper(c.args[0]) {
	case "ON", "1":
		s.gen.on = true
	case "OFF", "0":
		s.gen.on = false
	default:
		return fail(errIllegal)
	}
	s.applyGen()
	return result{}
}

func digPoints(s *Server, c command, _ []int) result {
	return setNumber(c, 1, MaxPoints, func(v float64) { s.dig.points = int(math.Round(v)) })
}

func digPointsQuery(s *Server, c command, _ []int) result {
	if len(c.args) == 1 && matchWord(c.args[0], "MAXimum") {
		return num(MaxPoints)
	}
	if len(c.args) == 1 && matchWord(c.args[0], "MINimum") {
		return num(1)
	}
	return num(float64(s.dig.points))
}

func digInterval(s *Server, c command, _ []int) result {
	return setNumber(c, MinIntervalS, MaxIntervalS, func(v float64) { s.dig.intervalS = nearest125(v, MinIntervalS, MaxIntervalS) })
}

// channel returns the channel index for suffix n (1 or 2).
func channel(sfx []int) (int, *scpiError) {
	if len(sfx) == 0 || sfx[0] < 1 || sfx[0] > 2 {
		return 0, &errSuffix
	}
	return sfx[0] - 1, nil
}

func chanQuery(f func(chanSetup) string) handler {
	return func(s *Server, _ command, sfx []int) result {
		i, e := channel(sfx)
		if e != nil {
			return fail(*e)
		}
		return text(f(s.dig.ch[i]))
	}
}

func digRange(s *Server, c command, sfx []int) result {
	i, e := channel(sfx)
	if e != nil {
		return fail(*e)
	}
	return setNumber(c, MinRangeV, MaxRangeV, func(v float64) { s.dig.ch[i].rangeV = ceil125(v, MinRangeV, MaxRangeV) })
}

func digOffset(s *Server, c command, sfx []int) result {
	i, e := channel(sfx)
	if e != nil {
		return fail(*e)
	}
	return setNumber(c, -MaxOffsetV, MaxOffsetV, func(v float64) { s.dig.ch[i].offsetV = v })
}

func digCoupling(s *Server, c command, sfx []int) result {
	i, e := channel(sfx)
	if e != nil {
		return fail(*e)
	}
	if len(c.args) != 1 {
		return fail(errParamNotAll)
	}
	switch strings.ToUpper(c.args[0]) {
	case "AC":
		s.dig.ch[i].ac = true
	case "DC":
		s.dig.ch[i].ac = false
	default:
		return fail(errIllegal)
	}
	return result{}
}

func digFormat(s *Server, c command, _ []int) result {
	if len(c.args) == 0 || len(c.args) > 2 {
		return fail(errParamNotAll)
	}
	kind := c.args[0]
	bits := ""
	if len(c.args) == 2 {
		bits = c.args[1]
	}
	switch {
	case matchWord(kind, "REAL") && (bits == "" || bits == "32"):
		s.dig.format = "REAL,32"
	case matchWord(kind, "INTeger") && (bits == "" || bits == "16"):
		s.dig.format = "INT,16"
	case matchWord(kind, "INTeger") && bits == "8":
		s.dig.format = "INT,8"
	case matchWord(kind, "ASCii") && bits == "":
		s.dig.format = "ASC"
	default:
		return fail(errIllegal)
	}
	return result{}
}

func digBorder(s *Server, c command, _ []int) result {
	if len(c.args) != 1 {
		return fail(errParamNotAll)
	}
	switch {
	case matchWord(c.args[0], "NORMal"):
		s.dig.swapped = false
	case matchWord(c.args[0], "SWAPped"):
		s.dig.swapped = true
	default:
		return fail(errIllegal)
	}
	return result{}
}

// effectiveSetup is a channel's setup with the scenario's ADC bits.
func (s *Server) effectiveSetup(i int) chanSetup {
	cs := s.dig.ch[i]
	cs.bits = s.sc.Meas.ADCBits
	return cs
}

// int8Shift is how many low bits INT,8 data drop from the ADC's codes.
func int8Shift(cs chanSetup) int { return max(cs.bits-8, 0) }

func traceChannel(c command) (int, *scpiError) {
	if len(c.args) != 1 {
		return 0, &errMissing
	}
	a := strings.ToUpper(c.args[0])
	a = strings.TrimPrefix(strings.TrimPrefix(a, "CHANNEL"), "CH")
	switch a {
	case "1":
		return 0, nil
	case "2":
		return 1, nil
	}
	return 0, &errIllegal
}

// digScale answers TRACe:SCALe? CH<n>: volts per code of the record's
// integer data (for REAL and ASCii data, the ADC step).
func digScale(s *Server, c command, _ []int) result {
	i, e := traceChannel(c)
	if e != nil {
		return fail(*e)
	}
	cs := s.effectiveSetup(i)
	if s.dig.acq != nil {
		cs = s.dig.acq.setup[i]
	}
	if s.dig.format == "INT,8" {
		return num(cs.lsb() * float64(int(1)<<int8Shift(cs)))
	}
	return num(cs.lsb())
}

// digTraceOffset answers TRACe:OFFSet? CH<n>: the volts at code 0.
func digTraceOffset(s *Server, c command, _ []int) result {
	i, e := traceChannel(c)
	if e != nil {
		return fail(*e)
	}
	cs := s.dig.ch[i]
	if s.dig.acq != nil {
		cs = s.dig.acq.setup[i]
	}
	return num(cs.offsetV)
}

// digInit starts an acquisition: the record covers points × interval
// from now, and is generated in the background from the bench as it is
// now.
func digInit(s *Server, _ command, _ []int) result {
	n := s.dig.points
	dt := s.dig.intervalS
	t0 := s.now()
	start := s.epoch.Add(time.Duration(t0 * float64(time.Second)))
	a := &acquisition{
		done:   make(chan struct{}),
		end:    start.Add(time.Duration(float64(n) * dt * float64(time.Second))),
		setup:  [2]chanSetup{s.effectiveSetup(0), s.effectiveSetup(1)},
		format: s.dig.format, swapped: s.dig.swapped,
	}
	snap := *s.b
	n1, n2 := s.b.noiseOffsets()
	s.dig.acq = a
	go func() {
		a.c1, a.c2, a.enc = snap.generate(n, t0, dt, a.setup, a.format, a.swapped, n1, n2)
		close(a.done)
	}()
	return result{}
}

// opc answers *OPC? once the digitizer's acquisition (if any) is
// complete; the generator's settings complete at once.
func (s *Server) opc(gen bool) result {
	if !gen {
		s.mu.Lock()
		a := s.dig.acq
		s.mu.Unlock()
		if a != nil && !s.waitAcquisition(a) {
			return fail(scpiError{-200, "Execution error"})
		}
	}
	return text("1")
}

// traceData answers TRACe[:DATA]? CH<n> with an IEEE 488.2 definite
// length block (or an ASCii list), waiting for the acquisition to end.
func (s *Server) traceData(c command) result {
	i, e := traceChannel(c)
	if e != nil {
		return fail(*e)
	}
	s.mu.Lock()
	a := s.dig.acq
	swapped, format := s.dig.swapped, s.dig.format
	s.mu.Unlock()
	if a == nil {
		return fail(errStale)
	}
	if !s.waitAcquisition(a) {
		return fail(scpiError{-200, "Execution error"})
	}
	if format == a.format && swapped == a.swapped {
		return a.enc[i]
	}
	codes := a.c1
	if i == 1 {
		codes = a.c2
	}
	return encodeRecord(codes, a.setup[i], format, swapped)
}

// encodeRecord encodes ADC codes as the format asks: REAL,32 volts,
// INT,16 codes or INT,8 codes (the top 8 bits, rounded down), each with
// volts = code·TRACe:SCALe? + TRACe:OFFSet?, or ASCii volts separated by
// commas. The format is the one in force when the data are fetched.
func encodeRecord(codes []int16, cs chanSetup, format string, swapped bool) result {
	lsb, off := cs.lsb(), cs.offsetV
	var order binary.ByteOrder = binary.BigEndian
	if swapped {
		order = binary.LittleEndian
	}
	if format == "ASC" {
		out := make([]byte, 0, len(codes)*10)
		for j, q := range codes {
			if j > 0 {
				out = append(out, ',')
			}
			out = strconv.AppendFloat(out, float64(float32(float64(q)*lsb+off)), 'g', -1, 32)
		}
		return result{reply: out}
	}
	size := map[string]int{"REAL,32": 4, "INT,16": 2, "INT,8": 1}[format]
	nb := len(codes) * size
	count := strconv.Itoa(nb)
	out := make([]byte, 0, 2+len(count)+nb)
	out = append(out, '#', byte('0'+len(count)))
	out = append(out, count...)
	body := out[len(out) : len(out)+nb]
	switch format {
	case "REAL,32":
		encodeReal32(body, codes, lsb, off, swapped)
	case "INT,16":
		for j, q := range codes {
			order.PutUint16(body[2*j:], uint16(q))
		}
	case "INT,8":
		sh := int8Shift(cs)
		for j, q := range codes {
			body[j] = byte(int8(q >> sh))
		}
	}
	return result{reply: out[:len(out)+nb], block: true}
}

// The 1-2-5 sequence of settings.
func steps125(lo, hi float64) []float64 {
	var out []float64
	for dec := math.Floor(math.Log10(lo)) - 1; ; dec++ {
		for _, m := range []float64{1, 2, 5} {
			v := m * math.Pow(10, dec)
			v, _ = strconv.ParseFloat(strconv.FormatFloat(v, 'g', 12, 64), 64)
			if v >= lo*(1-1e-9) && v <= hi*(1+1e-9) {
				out = append(out, v)
			}
			if v > hi {
				return out
			}
		}
	}
}

// nearest125 rounds v to the nearest 1-2-5 value in [lo, hi], nearest in
// log scale.
func nearest125(v, lo, hi float64) float64 {
	best := lo
	for _, s := range steps125(lo, hi) {
		if math.Abs(math.Log(s/v)) < math.Abs(math.Log(best/v)) {
			best = s
		}
	}
	return best
}

// ceil125 rounds v up to the next 1-2-5 value (the window then holds
// the requested span), within [lo, hi].
func ceil125(v, lo, hi float64) float64 {
	for _, s := range steps125(lo, hi) {
		if s >= v*(1-1e-9) {
			return s
		}
	}
	return hi
}

// encodeReal32 writes codes as float32 volts (code·lsb + off) into body,
// big-endian unless swapped, in parallel pieces for long records.
func encodeReal32(body []byte, codes []int16, lsb, off float64, swapped bool) {
	piece := func(body []byte, codes []int16) {
		body = body[:4*len(codes)]
		if swapped {
			for j, q := range codes {
				binary.LittleEndian.PutUint32(body[4*j:], math.Float32bits(float32(float64(q)*lsb+off)))
			}
			return
		}
		for j, q := range codes {
			binary.BigEndian.PutUint32(body[4*j:], math.Float32bits(float32(float64(q)*lsb+off)))
		}
	}
	workers := min(runtime.GOMAXPROCS(0), len(codes)>>16)
	if workers < 2 {
		piece(body, codes)
		return
	}
	per := (len(codes) + workers - 1) / workers
	var wg sync.WaitGroup
	for lo := 0; lo < len(codes); lo += per {
		hi := min(lo+per, len(codes))
		wg.Add(1)
		go func() {
			defer wg.Done()
			piece(body[4*lo:], codes[lo:hi])
		}()
	}
	wg.Wait()
}

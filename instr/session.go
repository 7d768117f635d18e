package instr

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"sync"
	"time"
)

// InstrumentError is an error the instrument reported in its error
// queue (SYSTem:ERRor?), as opposed to a malformed or missing reply.
type InstrumentError struct {
	Code int    // SCPI error number, e.g. -113
	Msg  string // the instrument's text, e.g. "Undefined header"
	Cmd  string // the last command sent before the error was read
	Addr string // the instrument
}

func (e *InstrumentError) Error() string {
	return fmt.Sprintf("instrument %s reported error %d, \"%s\" after %q", e.Addr, e.Code, e.Msg, e.Cmd)
}

// DefaultTimeout is a Session's timeout when NewSession is given zero.
const DefaultTimeout = 5 * time.Second

// maxLine bounds a text reply; longer replies are an error.
const maxLine = 1 << 20

// errorQuery reads one entry of the error queue (SCPI-1999; memory).
const errorQuery = "SYSTem:ERRor?"

// maxErrors bounds how many entries DrainErrors reads, so an instrument
// that never reports 0 cannot hold the session.
const maxErrors = 64

// Session is the SCPI line layer over one Conn: commands end with a
// newline, replies end at a newline, and blocks are read by their
// header's byte count. Every read and write has a deadline: the session
// timeout (an idle timeout: it restarts whenever bytes arrive) or the
// context's deadline, whichever is sooner. Cancelling the context
// interrupts a TCP exchange at once; serial and usbtmc reads cannot be
// interrupted and end at their deadline. A Session may be shared by
// goroutines: each exchange (a write, or a command and its whole reply)
// runs alone, so turning a generator's output off from a second
// goroutine waits for the exchange in flight and never interleaves with
// it. It never closes its Conn.
type Session struct {
	mu      sync.Mutex // held for one exchange
	c       Conn
	r       *bufio.Reader
	timeout time.Duration
	dec     decoder
	last    string // last command sent
	stale   bool   // a reply may still be in flight after a failure

	ctx         context.Context // of the current operation
	ctxDeadline time.Time       // of the current operation, zero if none
	extra       time.Duration   // added to the first read's deadline
	brief       time.Duration   // when nonzero, replaces the timeout for the next read
}

// NewSession returns a Session on c; timeout <= 0 means DefaultTimeout.
func NewSession(c Conn, timeout time.Duration) *Session {
	if timeout <= 0 {
		timeout = DefaultTimeout
	}
	s := &Session{c: c, timeout: timeout}
	s.r = bufio.NewReaderSize(deadlineReader{s}, scratchSize)
	return s
}

// Addr names the instrument.
func (s *Session) Addr() string { return s.c.Addr() }

// Timeout is the session's idle timeout.
func (s *Session) Timeout() time.Duration { return s.timeout }

// LastCommand is the last command sent other than SYSTem:ERRor?.
func (s *Session) LastCommand() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.last
}

// deadlineReader sets the read deadline before every read of the Conn,
// so the timeout counts from the last byte received.
type deadlineReader struct{ s *Session }

func (d deadlineReader) Read(p []byte) (int, error) {
	s := d.s
	if s.ctx != nil && s.ctx.Err() != nil {
		return 0, s.ctx.Err()
	}
	start := time.Now()
	t := start.Add(s.timeout + s.extra)
	if s.brief > 0 {
		t = start.Add(s.brief)
	}
	s.extra, s.brief = 0, 0
	if !s.ctxDeadline.IsZero() && s.ctxDeadline.Before(t) {
		t = s.ctxDeadline
	}
	if err := s.c.SetReadDeadline(t); err != nil {
		return 0, err
	}
	n, err := s.c.Read(p)
	if err != nil && isTimeout(err) && !errors.Is(err, ErrTimeout) {
		// Name the timeout here so the layers above add their context
		// ("block data: got 2000 of 4000 bytes") around it.
		err = fmt.Errorf("%w: nothing for %v", ErrTimeout, t.Sub(start).Round(time.Millisecond))
	}
	return n, err
}

// begin prepares an operation under ctx and returns its finisher.
func (s *Session) begin(ctx context.Context) (func(), error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	s.mu.Lock()
	s.ctx = ctx
	s.ctxDeadline, _ = ctx.Deadline()
	stop := func() {}
	if ctx.Done() != nil {
		if dc, ok := s.c.(interface{ SetDeadline(time.Time) error }); ok {
			// Unblock a pending read or write when ctx is cancelled, and
			// let that finish before the next exchange sets its deadlines.
			fired := make(chan struct{})
			cancel := context.AfterFunc(ctx, func() {
				dc.SetDeadline(time.Now())
				close(fired)
			})
			stop = func() {
				if !cancel() {
					<-fired
				}
			}
		}
	}
	if s.stale {
		s.flushStale()
	}
	return func() {
		stop()
		s.ctx = nil
		s.ctxDeadline = time.Time{}
		s.extra, s.brief = 0, 0
		s.mu.Unlock()
	}, nil
}

// flushStale discards a late reply left over from a failed operation:
// whatever arrives within a short grace period is dropped.
func (s *Session) flushStale() {
	s.stale = false
	s.r.Reset(deadlineReader{s})
	var buf [512]byte
	for {
		if err := s.c.SetReadDeadline(time.Now().Add(20 * time.Millisecond)); err != nil {
			return
		}
		if _, err := s.c.Read(buf[:]); err != nil {
			return
		}
	}
}

// fail wraps err with the operation, the command and the address, and
// marks the stream stale when a reply may be out of step.
func (s *Session) fail(ctx context.Context, op, cmd string, err error) error {
	s.stale = true
	cmd = clip(cmd)
	if ctx.Err() != nil {
		return fmt.Errorf("%s %q on %s: %w", op, cmd, s.Addr(), context.Cause(ctx))
	}
	if isTimeout(err) && !s.ctxDeadline.IsZero() && !time.Now().Before(s.ctxDeadline) {
		// The context's deadline, not the session's, fired the read.
		return fmt.Errorf("%s %q on %s: %w", op, cmd, s.Addr(), context.DeadlineExceeded)
	}
	if isTimeout(err) {
		if !errors.Is(err, ErrTimeout) {
			err = fmt.Errorf("%w: nothing for %v", ErrTimeout, s.timeout)
		}
		return fmt.Errorf("%s %q on %s: %w", op, cmd, s.Addr(), err)
	}
	if errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) {
		return fmt.Errorf("%s %q on %s: connection closed by the instrument: %w", op, cmd, s.Addr(), err)
	}
	return fmt.Errorf("%s %q on %s: %w", op, cmd, s.Addr(), err)
}

// clip shortens a command for an error message.
func clip(cmd string) string {
	const max = 80
	if len(cmd) <= max {
		return cmd
	}
	return cmd[:max] + "…"
}

func (s *Session) send(ctx context.Context, cmd string) error {
	if strings.ContainsAny(cmd, "\n\r") {
		return fmt.Errorf("command %q on %s: contains a line break", cmd, s.Addr())
	}
	if cmd != errorQuery {
		s.last = cmd
	}
	t := time.Now().Add(s.timeout)
	if !s.ctxDeadline.IsZero() && s.ctxDeadline.Before(t) {
		t = s.ctxDeadline
	}
	if err := s.c.SetWriteDeadline(t); err != nil {
		return s.fail(ctx, "write", cmd, err)
	}
	msg := make([]byte, 0, len(cmd)+1)
	msg = append(append(msg, cmd...), '\n')
	if _, err := s.c.Write(msg); err != nil {
		return s.fail(ctx, "write", cmd, err)
	}
	return nil
}

// Write sends one command (a newline is appended).
func (s *Session) Write(ctx context.Context, cmd string) error {
	done, err := s.begin(ctx)
	if err != nil {
		return fmt.Errorf("write %q on %s: %w", cmd, s.Addr(), err)
	}
	defer done()
	return s.send(ctx, cmd)
}

// Query sends cmd and returns the reply line without its terminator.
func (s *Session) Query(ctx context.Context, cmd string) (string, error) {
	return s.query(ctx, cmd, 0)
}

// QueryWait is Query with extra added to the timeout for the first byte
// of the reply, for commands such as *OPC? that answer only when an
// operation of known length has finished.
func (s *Session) QueryWait(ctx context.Context, cmd string, extra time.Duration) (string, error) {
	return s.query(ctx, cmd, extra)
}

func (s *Session) query(ctx context.Context, cmd string, extra time.Duration) (string, error) {
	done, err := s.begin(ctx)
	if err != nil {
		return "", fmt.Errorf("query %q on %s: %w", cmd, s.Addr(), err)
	}
	defer done()
	if err := s.send(ctx, cmd); err != nil {
		return "", err
	}
	s.extra = extra
	line, err := s.readLine()
	if err != nil {
		return "", s.fail(ctx, "query", cmd, err)
	}
	return line, nil
}

// QueryNumber is Query followed by ParseNumber.
func (s *Session) QueryNumber(ctx context.Context, cmd string) (float64, error) {
	line, err := s.Query(ctx, cmd)
	if err != nil {
		return 0, err
	}
	v, err := ParseNumber(line)
	if err != nil {
		return 0, fmt.Errorf("query %q on %s: %w", cmd, s.Addr(), err)
	}
	return v, nil
}

// readLine reads up to a newline and strips "\n" or "\r\n".
func (s *Session) readLine() (string, error) {
	line, err := s.r.ReadSlice('\n')
	if err == nil {
		return strings.TrimSuffix(string(line[:len(line)-1]), "\r"), nil
	}
	if !errors.Is(err, bufio.ErrBufferFull) {
		return "", unexpectedEOF(err, replyCut(len(line)))
	}
	long := append([]byte(nil), line...)
	for {
		line, err = s.r.ReadSlice('\n')
		long = append(long, line...)
		if len(long) > maxLine {
			return "", fmt.Errorf("reply longer than %d bytes", maxLine)
		}
		if err == nil {
			return strings.TrimSuffix(string(long[:len(long)-1]), "\r"), nil
		}
		if !errors.Is(err, bufio.ErrBufferFull) {
			return "", unexpectedEOF(err, replyCut(len(long)))
		}
	}
}

func replyCut(n int) string {
	if n == 0 {
		return "no reply"
	}
	return fmt.Sprintf("reply cut after %d bytes", n)
}

// QueryBlock sends cmd and decodes the reply — an IEEE 488.2 block, or
// a comma-separated line when f.Encoding is ASCII — into dst, which
// must have exactly the number of samples the instrument sends. Samples
// are converted in place from a reused buffer: a fetch allocates
// nothing whatever its length.
func (s *Session) QueryBlock(ctx context.Context, cmd string, f DataFormat, dst []float64) error {
	return s.queryBlock(ctx, cmd, f, dst, 0)
}

// QueryBlockWait is QueryBlock with extra time for the first byte.
func (s *Session) QueryBlockWait(ctx context.Context, cmd string, f DataFormat, dst []float64, extra time.Duration) error {
	return s.queryBlock(ctx, cmd, f, dst, extra)
}

func (s *Session) queryBlock(ctx context.Context, cmd string, f DataFormat, dst []float64, extra time.Duration) error {
	done, err := s.begin(ctx)
	if err != nil {
		return fmt.Errorf("query %q on %s: %w", cmd, s.Addr(), err)
	}
	defer done()
	if err := s.send(ctx, cmd); err != nil {
		return err
	}
	s.extra = extra
	if err := s.dec.readBlock(s.r, f, dst); err != nil {
		var be *BlockError
		if errors.As(err, &be) && be.inStep {
			// The bad reply was consumed; finish it to stay in step.
			s.endReply()
			return fmt.Errorf("query %q on %s: %w", cmd, s.Addr(), err)
		}
		return s.fail(ctx, "query", cmd, err) // out of step: the rest is flushed
	}
	s.endReply()
	return nil
}

// endReply consumes the response message terminator after a block
// (IEEE 488.2 clause 8.5: NL with END; memory). An instrument that
// sends none is tolerated: the terminator is awaited only briefly.
func (s *Session) endReply() {
	if s.r.Buffered() == 0 {
		s.extra, s.brief = 0, 50*time.Millisecond
		if _, err := s.r.Peek(1); err != nil {
			s.brief = 0
			return
		}
	}
	b, _ := s.r.Peek(1)
	if len(b) == 1 && b[0] == '\r' {
		s.r.Discard(1)
		b, _ = s.r.Peek(1)
	}
	if len(b) == 1 && b[0] == '\n' {
		s.r.Discard(1)
	}
}

// IDN returns the *IDN? reply.
func (s *Session) IDN(ctx context.Context) (string, error) {
	return s.Query(ctx, "*IDN?")
}

// Reset sends *RST.
func (s *Session) Reset(ctx context.Context) error { return s.Write(ctx, "*RST") }

// Clear sends *CLS, which empties the error queue and status registers.
func (s *Session) Clear(ctx context.Context) error { return s.Write(ctx, "*CLS") }

// OPC waits for pending operations with *OPC?, allowing extra beyond
// the session timeout for the reply; the reply must be 1.
func (s *Session) OPC(ctx context.Context, extra time.Duration) error {
	r, err := s.QueryWait(ctx, "*OPC?", extra)
	if err != nil {
		return err
	}
	if strings.TrimSpace(strings.TrimPrefix(r, "+")) != "1" {
		return fmt.Errorf("*OPC? on %s: reply %q, want 1", s.Addr(), r)
	}
	return nil
}

// ErrorQueue reads SYSTem:ERRor? until it reports 0 (at most 64
// entries) and returns the entries, oldest first.
func (s *Session) ErrorQueue(ctx context.Context) ([]InstrumentError, error) {
	cmd := s.LastCommand()
	var out []InstrumentError
	for range maxErrors {
		r, err := s.Query(ctx, errorQuery)
		if err != nil {
			return out, err
		}
		code, msg, err := ParseErrorReply(r)
		if err != nil {
			return out, fmt.Errorf("SYSTem:ERRor? on %s: %w", s.Addr(), err)
		}
		if code == 0 {
			return out, nil
		}
		out = append(out, InstrumentError{Code: code, Msg: msg, Cmd: cmd, Addr: s.Addr()})
	}
	return out, fmt.Errorf("SYSTem:ERRor? on %s: still not empty after %d entries", s.Addr(), maxErrors)
}

// DrainErrors empties the error queue and returns nil if it was empty,
// or the entries as *InstrumentError values (joined with errors.Join
// when there are several; use errors.As to get the first).
func (s *Session) DrainErrors(ctx context.Context) error {
	q, err := s.ErrorQueue(ctx)
	errs := make([]error, 0, len(q)+1)
	for i := range q {
		errs = append(errs, &q[i])
	}
	if err != nil {
		errs = append(errs, err)
	}
	return errors.Join(errs...)
}

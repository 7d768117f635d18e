package sweep

// Reading session files and loop-gain CSV files, and writing the points of
// a session as CSV. The session file is the JSON encoding of Session (the
// JSON tags in api.go are the format); SchemaVersion numbers it.

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/cmplx"
	"os"
	"sort"
	"strconv"
	"strings"

	"loopsweep/analysis"
)

// SchemaVersion is the session file layout this package writes and reads.
// Version 1 is the first published layout; a reader meeting a larger
// number refuses the file rather than guess at fields it does not know.
const SchemaVersion = 1

// Sentinels for errors.Is on what LoadSession, ParseSession and ReadCSV
// return.
var (
	// ErrNotSession: the file is not a loopsweep session (not a JSON
	// object, or an object with neither "schema" nor "points").
	ErrNotSession = errors.New("not a loopsweep session file")
	// ErrSchema: the session's schema version is missing or not one this
	// build reads.
	ErrSchema = errors.New("unsupported session schema")
	// ErrNotCSV: the file is not a loop-gain CSV (its header lacks the
	// required columns).
	ErrNotCSV = errors.New("not a loop-gain CSV file")
)

// FileError is an error in a file's content, located like csv.ParseError:
// Line and Column count from 1; zero means unknown. Offset is the byte
// offset from the start of the file where the reader stopped (JSON), or
// -1 when unknown.
type FileError struct {
	File   string
	Line   int
	Column int
	Offset int64
	Err    error
}

func (e *FileError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
		if e.Column > 0 {
			fmt.Fprintf(&b, ":%d", e.Column)
		}
	}
	if e.Offset >= 0 {
		fmt.Fprintf(&b, " (byte %d)", e.Offset)
	}
	b.WriteString(": ")
	b.WriteString(e.Err.Error())
	return b.String()
}

func (e *FileError) Unwrap() error { return e.Err }

// fileErr locates err at byte offset off of data (off < 0: no location).
func fileErr(name string, data []byte, off int64, err error) *FileError {
	fe := &FileError{File: name, Offset: -1, Err: err}
	if off >= 0 {
		if off > int64(len(data)) {
			off = int64(len(data))
		}
		fe.Offset = off
		head := data[:off]
		fe.Line = bytes.Count(head, []byte{'\n'}) + 1
		fe.Column = int(off) - (bytes.LastIndexByte(head, '\n') + 1) + 1
	}
	return fe
}

// maxSessionBytes bounds what LoadSession reads: a session of the largest
// plan (10 000 points) with a few attempts each is well under this.
const maxSessionBytes = 256 << 20

// LoadSession reads and checks the session file at path. Errors name the
// file; malformed JSON gives a *FileError with line, column and byte
// offset; errors.Is(err, ErrNotSession) or ErrSchema tells a file that is
// not a session or of an unknown version. See ParseSession.
func LoadSession(path string) (*Session, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("open session: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, maxSessionBytes+1))
	if err != nil {
		return nil, fmt.Errorf("read session %s: %w", path, err)
	}
	if len(data) > maxSessionBytes {
		return nil, &FileError{File: path, Offset: -1, Err: fmt.Errorf("larger than %d MiB: %w", maxSessionBytes>>20, ErrNotSession)}
	}
	return ParseSession(data, path)
}

// sessionProbe decodes the keys whose absence matters: a missing
// "chosen" means the best attempt (−1), not the first; a missing
// re/im or gain_db/phase_deg is derived from the other pair.
type sessionProbe struct {
	Schema *int `json:"schema"`
	Points []struct {
		Chosen   *int `json:"chosen"`
		Attempts []struct {
			Re       *float64 `json:"re"`
			Im       *float64 `json:"im"`
			GainDB   *float64 `json:"gain_db"`
			PhaseDeg *float64 `json:"phase_deg"`
		} `json:"attempts"`
	} `json:"points"`
}

// LooksLikeJSON reports whether data's first non-blank byte (after an
// optional UTF-8 byte-order mark) opens a JSON object: how analyze tells
// a session from a CSV file.
func LooksLikeJSON(data []byte) bool {
	data = bytes.TrimPrefix(data, []byte("\xef\xbb\xbf"))
	data = bytes.TrimLeft(data, " \t\r\n")
	return len(data) > 0 && data[0] == '{'
}

// ParseSession decodes and checks a session file's content; name is used
// in errors. It accepts schema 1 and tolerates missing optional fields:
// a point without "chosen" uses its best attempt; an attempt with only
// re/im gets gain_db/phase_deg from them and the reverse; absent
// uncertainties, readings, settings and instruments stay zero. Unknown
// fields are ignored. It rejects: data that is not a JSON object or has
// neither "schema" nor "points" (ErrNotSession); a missing, zero or
// larger schema (ErrSchema); malformed JSON (a *FileError with the
// position); a point whose frequency is not positive, whose "chosen" is
// out of range, or an attempt with neither re/im nor gain_db/phase_deg.
func ParseSession(data []byte, name string) (*Session, error) {
	body := bytes.TrimPrefix(data, []byte("\xef\xbb\xbf"))
	bomLen := int64(len(data) - len(body))
	if !LooksLikeJSON(body) {
		return nil, &FileError{File: name, Offset: -1, Err: fmt.Errorf("does not start with a JSON object: %w", ErrNotSession)}
	}
	var probe sessionProbe
	if err := json.Unmarshal(body, &probe); err != nil {
		return nil, jsonErr(name, data, bomLen, err)
	}
	var keys map[string]json.RawMessage
	if err := json.Unmarshal(body, &keys); err != nil {
		return nil, jsonErr(name, data, bomLen, err)
	}
	_, hasPoints := keys["points"]
	switch {
	case probe.Schema == nil && !hasPoints:
		return nil, &FileError{File: name, Offset: -1, Err: fmt.Errorf("JSON object without \"schema\" or \"points\": %w", ErrNotSession)}
	case probe.Schema == nil:
		return nil, &FileError{File: name, Offset: -1, Err: fmt.Errorf("no \"schema\" field (this build reads schema %d): %w", SchemaVersion, ErrSchema)}
	case *probe.Schema > SchemaVersion:
		return nil, &FileError{File: name, Offset: -1, Err: fmt.Errorf("schema %d is newer than this build of loopsweep reads (%d); use a newer loopsweep: %w", *probe.Schema, SchemaVersion, ErrSchema)}
	case *probe.Schema < 1:
		return nil, &FileError{File: name, Offset: -1, Err: fmt.Errorf("schema %d is not a loopsweep schema version (1 is the first): %w", *probe.Schema, ErrSchema)}
	}
	// Schema 1 is the only layout so far. A later layout gets a step here
	// that rewrites the decoded value up to the current one.
	var s Session
	if err := json.Unmarshal(body, &s); err != nil {
		return nil, jsonErr(name, data, bomLen, err)
	}
	for i := range s.Points {
		p := &s.Points[i]
		where := func(format string, a ...any) error {
			err := fmt.Errorf("point %d (%g Hz): %s", i+1, p.FreqHz, fmt.Sprintf(format, a...))
			return fileErr(name, data, bomLen+pointOffset(body, i), err)
		}
		if !(p.FreqHz > 0) || math.IsInf(p.FreqHz, 0) {
			return nil, where("freq_hz is not a positive frequency")
		}
		pp := probe.Points[i]
		if pp.Chosen == nil {
			p.Chosen = -1
		}
		if p.Chosen < -1 || p.Chosen >= len(p.Attempts) {
			return nil, where("chosen %d is not -1 or an index of its %d attempts", p.Chosen, len(p.Attempts))
		}
		for j := range p.Attempts {
			a := &p.Attempts[j]
			k := pp.Attempts[j]
			hasRI := k.Re != nil && k.Im != nil
			hasGP := k.GainDB != nil && k.PhaseDeg != nil
			switch {
			case hasRI && !hasGP:
				a.GainDB, a.PhaseDeg = polarDB(complex(a.Re, a.Im))
			case hasGP && !hasRI:
				h := cmplx.Rect(math.Pow(10, a.GainDB/20), a.PhaseDeg*math.Pi/180)
				a.Re, a.Im = real(h), imag(h)
			case !hasRI && !hasGP:
				return nil, where("attempt %d has neither re/im nor gain_db/phase_deg", j+1)
			}
			if !finite(a.Re) || !finite(a.Im) || !finite(a.GainDB) || !finite(a.PhaseDeg) {
				return nil, where("attempt %d: response re %g, im %g, %g dB, %g° is not finite", j+1, a.Re, a.Im, a.GainDB, a.PhaseDeg)
			}
			if a.FreqHz < 0 || !finite(a.FreqHz) {
				return nil, where("attempt %d: freq_hz %g is not a positive frequency", j+1, a.FreqHz)
			}
			if a.GainSigmaDB < 0 || a.PhaseSigmaDeg < 0 {
				return nil, where("attempt %d has a negative uncertainty", j+1)
			}
		}
	}
	if s.Schema != SchemaVersion {
		s.Schema = SchemaVersion
	}
	return &s, nil
}

// pointOffset returns the byte offset in body of element i of the
// top-level "points" array, or −1 when it cannot be found. body is known
// to be valid JSON.
func pointOffset(body []byte, i int) int64 {
	dec := json.NewDecoder(bytes.NewReader(body))
	if t, err := dec.Token(); err != nil || t != json.Delim('{') {
		return -1
	}
	for dec.More() {
		t, err := dec.Token()
		if err != nil {
			return -1
		}
		if key, _ := t.(string); key != "points" {
			var skip json.RawMessage
			if dec.Decode(&skip) != nil {
				return -1
			}
			continue
		}
		if t, err := dec.Token(); err != nil || t != json.Delim('[') {
			return -1
		}
		for k := 0; dec.More(); k++ {
			off := dec.InputOffset()
			var skip json.RawMessage
			if dec.Decode(&skip) != nil {
				return -1
			}
			if k == i {
				// InputOffset is just past the previous token; step over
				// the separator and blanks to the element itself.
				for off < int64(len(body)) && strings.IndexByte(" \t\r\n,", body[off]) >= 0 {
					off++
				}
				return off
			}
		}
		return -1
	}
	return -1
}

// polarDB returns 20·log10|h| and angle(h) in degrees, (−180, 180].
func polarDB(h complex128) (gainDB, phaseDeg float64) {
	gainDB = 20 * math.Log10(cmplx.Abs(h))
	phaseDeg = cmplx.Phase(h) * 180 / math.Pi
	if phaseDeg == -180 {
		phaseDeg = 180
	}
	return gainDB, phaseDeg
}

// jsonErr turns a decoding error into a *FileError at its offset (the
// offsets of encoding/json count from body, after bom bytes).
func jsonErr(name string, data []byte, bom int64, err error) error {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	switch {
	case errors.As(err, &se):
		msg := se.Error()
		if se.Offset >= int64(len(data))-bom || strings.Contains(msg, "unexpected end") {
			msg = "truncated or unterminated JSON (" + msg + ")"
		}
		return fileErr(name, data, bom+se.Offset, errors.New(msg))
	case errors.As(err, &te):
		field := te.Field
		if field == "" {
			field = "value"
		}
		return fileErr(name, data, bom+te.Offset, fmt.Errorf("%s: JSON %s where a %s belongs", field, te.Value, te.Type))
	default:
		return &FileError{File: name, Offset: -1, Err: err}
	}
}

// CSV columns. ReadCSV needs the first three; WriteCSV writes them all.
const (
	ColFreq       = "frequency_hz"
	ColGain       = "gain_db"
	ColPhase      = "phase_deg"
	ColGainSigma  = "gain_sigma_db"
	ColPhaseSigma = "phase_sigma_deg"
)

// CSVColumns are the columns WriteCSV writes, in order: the chosen
// attempt's frequency (Hz), gain (dB), phase (degrees, wrapped to
// (−180, 180] as measured), their standard uncertainties, the complex
// response re and im, the two channels' SNR (dB), the injection amplitude
// (Vpp), the cycles in the record, whether the point is flagged and why,
// how many attempts it has and which one (1-based) is used.
var CSVColumns = []string{
	ColFreq, ColGain, ColPhase, ColGainSigma, ColPhaseSigma,
	"re", "im", "snr1_db", "snr2_db", "amp_vpp", "cycles",
	"flagged", "flag", "attempts", "attempt_used",
}

// maxCSVRows bounds ReadCSV so a wrong file cannot exhaust memory.
const maxCSVRows = 1_000_000

// ReadCSV reads a loop-gain table: RFC 4180 CSV with a header row naming
// at least frequency_hz, gain_db and phase_deg (any order, any case;
// gain_sigma_db and phase_sigma_deg are used when present, other columns
// are ignored), lines starting with '#' are comments, blank lines are
// skipped. Frequencies must be positive and strictly ascending; phase may
// be wrapped or unwrapped (the result is unwrapped with
// analysis.UnwrapDeg). name is used in errors, which are *FileError with
// the line and column; a header without the required columns gives
// ErrNotCSV.
func ReadCSV(r io.Reader, name string) ([]analysis.Point, error) {
	br := bufio.NewReader(r)
	if b, err := br.Peek(3); err == nil && string(b) == "\xef\xbb\xbf" {
		br.Discard(3)
	}
	cr := csv.NewReader(br)
	cr.Comment = '#'
	cr.TrimLeadingSpace = true
	cr.FieldsPerRecord = -1
	lineErr := func(line, col int, format string, a ...any) error {
		return &FileError{File: name, Line: line, Column: col, Offset: -1, Err: fmt.Errorf(format, a...)}
	}
	readErr := func(err error) error {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			return &FileError{File: name, Line: pe.Line, Column: pe.Column, Offset: -1, Err: pe.Err}
		}
		return fmt.Errorf("read %s: %w", name, err)
	}
	head, err := cr.Read()
	if err == io.EOF {
		return nil, lineErr(0, 0, "empty: no header row (want %s, %s, %s): %w", ColFreq, ColGain, ColPhase, ErrNotCSV)
	}
	if err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			return nil, &FileError{File: name, Line: pe.Line, Column: pe.Column, Offset: -1, Err: fmt.Errorf("header row: %v: %w", pe.Err, ErrNotCSV)}
		}
		return nil, readErr(err)
	}
	headLine, _ := cr.FieldPos(0)
	col := map[string]int{}
	for i, h := range head {
		k := strings.ToLower(strings.TrimSpace(h))
		if _, dup := col[k]; dup && k != "" {
			return nil, lineErr(headLine, i+1, "column %q appears twice", k)
		}
		col[k] = i
	}
	for _, need := range []string{ColFreq, ColGain, ColPhase} {
		if _, ok := col[need]; !ok {
			return nil, lineErr(headLine, 0, "header has no %s column (want %s, %s, %s): %w", need, ColFreq, ColGain, ColPhase, ErrNotCSV)
		}
	}
	var pts []analysis.Point
	var phases []float64
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, readErr(err)
		}
		line, _ := cr.FieldPos(0)
		if len(pts) >= maxCSVRows {
			return nil, lineErr(line, 0, "more than %d rows", maxCSVRows)
		}
		if len(rec) != len(head) {
			return nil, lineErr(line, 0, "%d fields where the header has %d", len(rec), len(head))
		}
		num := func(c string, optional bool) (float64, error) {
			i, ok := col[c]
			if !ok {
				return 0, nil
			}
			t := strings.TrimSpace(rec[i])
			if t == "" && optional {
				return 0, nil
			}
			v, err := strconv.ParseFloat(t, 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				_, c0 := cr.FieldPos(i)
				return 0, lineErr(line, c0, "%s: %q is not a finite number", c, t)
			}
			return v, nil
		}
		var p analysis.Point
		if p.FreqHz, err = num(ColFreq, false); err != nil {
			return nil, err
		}
		if p.GainDB, err = num(ColGain, false); err != nil {
			return nil, err
		}
		if p.PhaseDeg, err = num(ColPhase, false); err != nil {
			return nil, err
		}
		if p.GainSigmaDB, err = num(ColGainSigma, true); err != nil {
			return nil, err
		}
		if p.PhaseSigmaDeg, err = num(ColPhaseSigma, true); err != nil {
			return nil, err
		}
		if p.FreqHz <= 0 {
			return nil, lineErr(line, 0, "%s: %g Hz is not a positive frequency", ColFreq, p.FreqHz)
		}
		if n := len(pts); n > 0 && p.FreqHz <= pts[n-1].FreqHz {
			return nil, lineErr(line, 0, "%s: %g Hz is not above the previous row's %g Hz (rows must ascend in frequency)", ColFreq, p.FreqHz, pts[n-1].FreqHz)
		}
		if p.GainSigmaDB < 0 || p.PhaseSigmaDeg < 0 {
			return nil, lineErr(line, 0, "negative uncertainty")
		}
		pts = append(pts, p)
		phases = append(phases, p.PhaseDeg)
	}
	if len(pts) == 0 {
		return nil, lineErr(0, 0, "no data rows after the header")
	}
	if un := analysis.UnwrapDeg(phases); len(un) == len(pts) {
		for i := range pts {
			pts[i].PhaseDeg = un[i]
		}
	}
	return pts, nil
}

// fmtFloat formats v so that strconv.ParseFloat gives v back exactly.
func fmtFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// WriteCSV writes the chosen attempt (Session.Chosen) of every measured
// point of s, in ascending frequency of the injected tone (Attempt.Tone),
// as RFC 4180 CSV (CRLF line ends, a header row of CSVColumns). Numbers
// are written in full precision so ReadCSV gives back exactly what
// Session.Curve gives.
func WriteCSV(w io.Writer, s *Session) error {
	cw := csv.NewWriter(w)
	cw.UseCRLF = true
	if err := cw.Write(CSVColumns); err != nil {
		return fmt.Errorf("write csv header: %w", err)
	}
	type row struct {
		f    float64
		i, k int
	}
	rows := make([]row, 0, len(s.Points))
	for i, p := range s.Points {
		a, ok := s.Chosen(i)
		if !ok {
			continue
		}
		k := 0
		for j := range p.Attempts {
			if p.Attempts[j] == a {
				k = j
				break
			}
		}
		rows = append(rows, row{a.Tone(p.FreqHz), i, k})
	}
	sort.SliceStable(rows, func(a, b int) bool { return rows[a].f < rows[b].f })
	for _, r := range rows {
		p := s.Points[r.i]
		a := p.Attempts[r.k]
		rec := []string{
			fmtFloat(r.f), fmtFloat(a.GainDB), fmtFloat(a.PhaseDeg),
			fmtFloat(a.GainSigmaDB), fmtFloat(a.PhaseSigmaDeg),
			fmtFloat(a.Re), fmtFloat(a.Im), fmtFloat(a.Ch1.SNRdB), fmtFloat(a.Ch2.SNRdB),
			fmtFloat(a.AmpVpp), fmtFloat(a.Cycles),
			strconv.FormatBool(p.Flagged), p.Flag,
			strconv.Itoa(len(p.Attempts)), strconv.Itoa(r.k + 1),
		}
		if err := cw.Write(rec); err != nil {
			return fmt.Errorf("write csv row for %g Hz: %w", r.f, err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("write csv: %w", err)
	}
	return nil
}

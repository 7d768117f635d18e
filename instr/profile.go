package instr

import (
	"bytes"
	"embed"
	"errors"
	"fmt"
	"os"
	"regexp"
	"strconv"
	"strings"
	"time"

	"github.com/BurntSushi/toml"
)

// Profile tells loopsweep how to operate one instrument: which commands
// set what, how to read back what the instrument actually chose, and
// how its data is encoded. Profiles are TOML files; the format is
// documented in the README ("Instruments and profiles") and in the
// commented template under testdata/profiles.
type Profile struct {
	Kind        string // "generator" or "digitizer"
	Name        string
	Description string
	Source      string // file the profile came from, or "builtin:<name>"

	Generator *GeneratorProfile // set when Kind is "generator"
	Digitizer *DigitizerProfile // set when Kind is "digitizer"
}

// GeneratorProfile is a signal generator's command set. Templates hold
// placeholders in braces, replaced by values when sent.
type GeneratorProfile struct {
	Setup          []string // sent once after connecting, in order
	Frequency      string   // sets the frequency: {hz}
	FrequencyQuery string   // reads it back, Hz ("" to skip)
	// Amplitude sets the amplitude; its placeholder gives the unit the
	// instrument expects: {vpp}, {vpk} or {vrms} (of a sine).
	Amplitude      string
	AmplitudeQuery string  // reads it back in the same unit ("" to skip)
	Offset         string  // sets the DC offset: {v} ("" if none)
	OffsetV        float64 // the offset sent after setup, volts
	OutputOn       string
	OutputOff      string
	OutputQuery    string  // reads the output state back ("" to skip)
	MaxVpp         float64 // the largest amplitude allowed, Vpp (0: no limit known)
	CheckErrors    bool    // read SYSTem:ERRor? after setup and each setting

	ampUnit string // "vpp", "vpk" or "vrms", from Amplitude
}

// DigitizerProfile is a two-channel digitizer's command set.
type DigitizerProfile struct {
	Setup          []string
	Channels       [2]string // what {ch} becomes for channel 1 and 2
	Points         string    // sets the record length: {n}
	PointsQuery    string
	MaxPoints      int    // largest record length (0: ask MaxPointsQuery, or unknown)
	MaxPointsQuery string //
	Interval       string // sets the sample interval: {s}  (or Rate)
	IntervalQuery  string // reads the actual interval back, seconds
	Rate           string // sets the sample rate: {hz}  (or Interval)
	RateQuery      string // reads the actual rate back, Hz
	// Range sets a channel's input range: {ch}, {v}. RangeIs says what
	// the number means: "half" (the window is offset ± v, SCPI's
	// SENSe:VOLTage:RANGe as loopsweep's generic profile uses it),
	// "full" (the window is v wide) or "per_division" (v volts per
	// division over Divisions divisions).
	Range      string
	RangeQuery string
	RangeIs    string
	Divisions  float64
	// Offset sets the centre of a channel's window: {ch}, {v}; "" if
	// the instrument has none.
	Offset      string
	OffsetQuery string
	CouplingAC  string // {ch}; "" if the instrument cannot AC-couple
	CouplingDC  string // {ch}
	Start       []string
	Done        DoneProfile
	Fetch       string // returns one channel's record: {ch}
	Data        DataProfile
	CheckErrors bool
}

// DoneProfile says how to know an acquisition finished.
type DoneProfile struct {
	Method string        // "opc": *OPC? answers 1 when done; "poll": ask Query until it returns Value; "none"
	Query  string        // for "poll"
	Value  string        // for "poll"
	Poll   time.Duration // between polls
}

// DataProfile says how fetched data is encoded and scaled to volts:
// volts = value·scale + offset, scale and offset fixed or queried.
type DataProfile struct {
	Encoding     Encoding
	LittleEndian bool
	Scale        float64 // volts per code (0 means 1 for ascii/real)
	ScaleQuery   string  // {ch}; replaces Scale when given
	Offset       float64 // volts
	OffsetQuery  string  // {ch}; replaces Offset when given
}

// SupportsAC reports whether the profile can AC-couple a channel.
func (p *DigitizerProfile) SupportsAC() bool { return p.CouplingAC != "" }

// SupportsOffset reports whether the profile can move a channel's window.
func (p *DigitizerProfile) SupportsOffset() bool { return p.Offset != "" }

// ProfileError reports a bad profile; it names the file, the line when
// known, and the key.
type ProfileError struct {
	File string
	Line int // 0 when not known (a missing key)
	Key  string
	Msg  string
}

func (e *ProfileError) Error() string {
	loc := e.File
	if e.Line > 0 {
		loc += ":" + strconv.Itoa(e.Line)
	}
	if e.Key != "" {
		return fmt.Sprintf("profile %s: key %s: %s", loc, e.Key, e.Msg)
	}
	return fmt.Sprintf("profile %s: %s", loc, e.Msg)
}

// The file layout. Field names are the TOML keys.
type profileFile struct {
	Kind        string         `toml:"kind"`
	Name        string         `toml:"name"`
	Description string         `toml:"description"`
	Generator   *generatorFile `toml:"generator"`
	Digitizer   *digitizerFile `toml:"digitizer"`
}

type generatorFile struct {
	Setup          []string `toml:"setup"`
	Frequency      *string  `toml:"frequency"`
	FrequencyQuery string   `toml:"frequency_query"`
	Amplitude      *string  `toml:"amplitude"`
	AmplitudeQuery string   `toml:"amplitude_query"`
	Offset         string   `toml:"offset"`
	OffsetV        float64  `toml:"offset_v"`
	OutputOn       *string  `toml:"output_on"`
	OutputOff      *string  `toml:"output_off"`
	OutputQuery    string   `toml:"output_query"`
	MaxVpp         float64  `toml:"max_vpp"`
	CheckErrors    *bool    `toml:"check_errors"`
}

type digitizerFile struct {
	Setup          []string  `toml:"setup"`
	Channels       []string  `toml:"channels"`
	Points         *string   `toml:"points"`
	PointsQuery    string    `toml:"points_query"`
	MaxPoints      int       `toml:"max_points"`
	MaxPointsQuery string    `toml:"max_points_query"`
	Interval       string    `toml:"interval"`
	IntervalQuery  string    `toml:"interval_query"`
	Rate           string    `toml:"rate"`
	RateQuery      string    `toml:"rate_query"`
	Range          *string   `toml:"range"`
	RangeQuery     string    `toml:"range_query"`
	RangeIs        string    `toml:"range_is"`
	Divisions      float64   `toml:"divisions"`
	Offset         string    `toml:"offset"`
	OffsetQuery    string    `toml:"offset_query"`
	CouplingAC     string    `toml:"coupling_ac"`
	CouplingDC     string    `toml:"coupling_dc"`
	Start          []string  `toml:"start"`
	Done           *doneFile `toml:"done"`
	Fetch          *string   `toml:"fetch"`
	Data           *dataFile `toml:"data"`
	CheckErrors    *bool     `toml:"check_errors"`
}

type doneFile struct {
	Method string `toml:"method"`
	Query  string `toml:"query"`
	Value  string `toml:"value"`
	PollMS int    `toml:"poll_ms"`
}

type dataFile struct {
	Format      *string `toml:"format"`
	ByteOrder   string  `toml:"byte_order"`
	Scale       float64 `toml:"scale"`
	ScaleQuery  string  `toml:"scale_query"`
	Offset      float64 `toml:"offset"`
	OffsetQuery string  `toml:"offset_query"`
}

var tomlTypeErr = regexp.MustCompile(`^toml: (?:line (\d+) )?\(last key "([^"]*)"\): (.*)$`)

//go:embed profiles/*.toml
var builtin embed.FS

// BuiltinProfile returns the built-in "generic" profile for kind
// "generator" or "digitizer": the standard SCPI-1999 command tree.
func BuiltinProfile(kind string) (*Profile, error) {
	switch kind {
	case "generator", "digitizer":
	default:
		return nil, fmt.Errorf("built-in profile: unknown kind %q (want generator or digitizer)", kind)
	}
	name := "profiles/generic-" + kind + ".toml"
	src, err := builtin.ReadFile(name)
	if err != nil {
		return nil, fmt.Errorf("built-in profile %s: %w", name, err)
	}
	return ParseProfile("builtin:generic-"+kind, src)
}

// LoadProfile reads and checks a profile file.
func LoadProfile(path string) (*Profile, error) {
	src, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("profile %s: %w", path, err)
	}
	return ParseProfile(path, src)
}

// ParseProfile parses profile text; file names the source in errors.
// Unknown keys, missing required keys, templates with unknown
// placeholders and undeclared data formats are *ProfileError values.
func ParseProfile(file string, src []byte) (*Profile, error) {
	var f profileFile
	md, err := toml.NewDecoder(bytes.NewReader(src)).Decode(&f)
	if err != nil {
		var pe toml.ParseError
		if errors.As(err, &pe) {
			return nil, &ProfileError{File: file, Line: pe.Position.Line, Msg: pe.Message}
		}
		// Type mismatches come as plain errors of the form
		// `toml: line N (last key "a.b"): message`.
		if m := tomlTypeErr.FindStringSubmatch(err.Error()); m != nil {
			line, _ := strconv.Atoi(m[1])
			if line == 0 {
				line = keyLine(src, m[2])
			}
			return nil, &ProfileError{File: file, Line: line, Key: m[2], Msg: m[3]}
		}
		return nil, &ProfileError{File: file, Msg: err.Error()}
	}
	c := checker{file: file, src: src}
	if und := md.Undecoded(); len(und) > 0 {
		k := und[0].String()
		return nil, c.err(k, "unknown key")
	}
	p := &Profile{Kind: f.Kind, Name: f.Name, Description: f.Description, Source: file}
	if p.Name == "" {
		return nil, c.err("name", "missing")
	}
	switch f.Kind {
	case "generator":
		if f.Digitizer != nil {
			return nil, c.err("digitizer", "a generator profile has no [digitizer] table")
		}
		if f.Generator == nil {
			return nil, c.err("generator", "missing table [generator]")
		}
		g, err := c.generator(f.Generator)
		if err != nil {
			return nil, err
		}
		p.Generator = g
	case "digitizer":
		if f.Generator != nil {
			return nil, c.err("generator", "a digitizer profile has no [generator] table")
		}
		if f.Digitizer == nil {
			return nil, c.err("digitizer", "missing table [digitizer]")
		}
		d, err := c.digitizer(f.Digitizer)
		if err != nil {
			return nil, err
		}
		p.Digitizer = d
	case "":
		return nil, c.err("kind", "missing (want \"generator\" or \"digitizer\")")
	default:
		return nil, c.err("kind", fmt.Sprintf("%q: want \"generator\" or \"digitizer\"", f.Kind))
	}
	return p, nil
}

// checker validates a decoded file and builds errors with line numbers.
type checker struct {
	file string
	src  []byte
}

// err reports msg at key; a missing key is reported at the line of the
// nearest enclosing table that exists.
func (c checker) err(key, msg string) error {
	line := 0
	for k := key; line == 0 && k != ""; {
		line = keyLine(c.src, k)
		i := strings.LastIndexByte(k, '.')
		if i < 0 {
			break
		}
		k = k[:i]
	}
	return &ProfileError{File: c.file, Line: line, Key: key, Msg: msg}
}

// tmpl checks that template s at key uses only the placeholders in
// allowed and every one in required.
func (c checker) tmpl(key, s string, required []string, allowed ...string) error {
	names, err := placeholders(s)
	if err != nil {
		return c.err(key, fmt.Sprintf("template %q: %v", s, err))
	}
	for _, n := range names {
		ok := false
		for _, a := range allowed {
			ok = ok || n == a
		}
		for _, a := range required {
			ok = ok || n == a
		}
		if !ok {
			want := "none"
			if all := append(append([]string(nil), required...), allowed...); len(all) > 0 {
				want = "{" + strings.Join(all, "}, {") + "}"
			}
			return c.err(key, fmt.Sprintf("template %q: unknown placeholder {%s} (allowed here: %s)", s, n, want))
		}
	}
	for _, r := range required {
		found := false
		for _, n := range names {
			found = found || n == r
		}
		if !found {
			return c.err(key, fmt.Sprintf("template %q lacks the placeholder {%s}", s, r))
		}
	}
	return nil
}

func (c checker) tmpls(key string, list []string, allowed ...string) error {
	for i, s := range list {
		if strings.TrimSpace(s) == "" {
			return c.err(key, fmt.Sprintf("entry %d is empty", i+1))
		}
		if err := c.tmpl(key, s, nil, allowed...); err != nil {
			return err
		}
	}
	return nil
}

func (c checker) generator(g *generatorFile) (*GeneratorProfile, error) {
	const t = "generator."
	if g.Frequency == nil {
		return nil, c.err(t+"frequency", "missing")
	}
	if g.Amplitude == nil {
		return nil, c.err(t+"amplitude", "missing")
	}
	if g.OutputOn == nil {
		return nil, c.err(t+"output_on", "missing")
	}
	if g.OutputOff == nil {
		return nil, c.err(t+"output_off", "missing")
	}
	p := &GeneratorProfile{
		Setup: g.Setup, Frequency: *g.Frequency, FrequencyQuery: g.FrequencyQuery,
		Amplitude: *g.Amplitude, AmplitudeQuery: g.AmplitudeQuery,
		Offset: g.Offset, OffsetV: g.OffsetV,
		OutputOn: *g.OutputOn, OutputOff: *g.OutputOff, OutputQuery: g.OutputQuery,
		MaxVpp: g.MaxVpp, CheckErrors: g.CheckErrors == nil || *g.CheckErrors,
	}
	checks := []error{
		c.tmpls(t+"setup", p.Setup),
		c.tmpl(t+"frequency", p.Frequency, []string{"hz"}),
		c.tmpl(t+"frequency_query", p.FrequencyQuery, nil),
		c.tmpl(t+"amplitude_query", p.AmplitudeQuery, nil),
		c.tmpl(t+"output_on", p.OutputOn, nil),
		c.tmpl(t+"output_off", p.OutputOff, nil),
		c.tmpl(t+"output_query", p.OutputQuery, nil),
	}
	if p.Offset != "" {
		checks = append(checks, c.tmpl(t+"offset", p.Offset, []string{"v"}))
	} else if p.OffsetV != 0 {
		checks = append(checks, c.err(t+"offset_v", "set, but there is no offset command"))
	}
	for _, e := range checks {
		if e != nil {
			return nil, e
		}
	}
	names, err := placeholders(p.Amplitude)
	if err != nil || len(names) != 1 || (names[0] != "vpp" && names[0] != "vpk" && names[0] != "vrms") {
		return nil, c.err(t+"amplitude", fmt.Sprintf("template %q: want exactly one of {vpp}, {vpk} or {vrms}, which also names the unit", p.Amplitude))
	}
	p.ampUnit = names[0]
	if p.MaxVpp < 0 {
		return nil, c.err(t+"max_vpp", "negative")
	}
	return p, nil
}

func (c checker) digitizer(d *digitizerFile) (*DigitizerProfile, error) {
	const t = "digitizer."
	for _, req := range []struct {
		key string
		ok  bool
	}{{"points", d.Points != nil}, {"range", d.Range != nil}, {"fetch", d.Fetch != nil}, {"data", d.Data != nil}} {
		if !req.ok {
			return nil, c.err(t+req.key, "missing")
		}
	}
	p := &DigitizerProfile{
		Setup: d.Setup, Points: *d.Points, PointsQuery: d.PointsQuery,
		MaxPoints: d.MaxPoints, MaxPointsQuery: d.MaxPointsQuery,
		Interval: d.Interval, IntervalQuery: d.IntervalQuery, Rate: d.Rate, RateQuery: d.RateQuery,
		Range: *d.Range, RangeQuery: d.RangeQuery, RangeIs: d.RangeIs, Divisions: d.Divisions,
		Offset: d.Offset, OffsetQuery: d.OffsetQuery, CouplingAC: d.CouplingAC, CouplingDC: d.CouplingDC,
		Start: d.Start, Fetch: *d.Fetch, CheckErrors: d.CheckErrors == nil || *d.CheckErrors,
		Channels: [2]string{"1", "2"},
	}
	switch len(d.Channels) {
	case 0:
	case 2:
		p.Channels = [2]string{d.Channels[0], d.Channels[1]}
	default:
		return nil, c.err(t+"channels", fmt.Sprintf("has %d entries, want 2", len(d.Channels)))
	}
	switch {
	case p.Interval == "" && p.Rate == "":
		return nil, c.err(t+"interval", "missing (give interval = \"…{s}\" or rate = \"…{hz}\")")
	case p.Interval != "" && p.Rate != "":
		return nil, c.err(t+"rate", "give interval or rate, not both")
	}
	if p.MaxPoints < 0 {
		return nil, c.err(t+"max_points", "negative")
	}
	switch p.RangeIs {
	case "":
		p.RangeIs = "half"
	case "half", "full":
	case "per_division":
		if p.Divisions <= 0 {
			return nil, c.err(t+"divisions", "range_is = \"per_division\" needs divisions > 0")
		}
	default:
		return nil, c.err(t+"range_is", fmt.Sprintf("%q: want \"half\", \"full\" or \"per_division\"", p.RangeIs))
	}
	checks := []error{
		c.tmpls(t+"setup", p.Setup),
		c.tmpl(t+"points", p.Points, []string{"n"}),
		c.tmpl(t+"points_query", p.PointsQuery, nil),
		c.tmpl(t+"max_points_query", p.MaxPointsQuery, nil),
		c.tmpl(t+"interval_query", p.IntervalQuery, nil),
		c.tmpl(t+"rate_query", p.RateQuery, nil),
		c.tmpl(t+"range", p.Range, []string{"v"}, "ch"),
		c.tmpl(t+"range_query", p.RangeQuery, nil, "ch"),
		c.tmpl(t+"offset_query", p.OffsetQuery, nil, "ch"),
		c.tmpl(t+"coupling_ac", p.CouplingAC, nil, "ch"),
		c.tmpl(t+"coupling_dc", p.CouplingDC, nil, "ch"),
		c.tmpls(t+"start", p.Start),
		c.tmpl(t+"fetch", p.Fetch, nil, "ch"),
	}
	if p.Interval != "" {
		checks = append(checks, c.tmpl(t+"interval", p.Interval, []string{"s"}))
	}
	if p.Rate != "" {
		checks = append(checks, c.tmpl(t+"rate", p.Rate, []string{"hz"}))
	}
	if p.Offset != "" {
		checks = append(checks, c.tmpl(t+"offset", p.Offset, []string{"v"}, "ch"))
	}
	for _, e := range checks {
		if e != nil {
			return nil, e
		}
	}
	if len(p.Start) == 0 {
		return nil, c.err(t+"start", "missing (the command that starts an acquisition, e.g. [\"INITiate\"])")
	}
	p.Done = DoneProfile{Method: "opc", Poll: 20 * time.Millisecond}
	if d.Done != nil {
		const k = t + "done."
		if d.Done.Method != "" {
			p.Done.Method = d.Done.Method
		}
		p.Done.Query, p.Done.Value = d.Done.Query, d.Done.Value
		if d.Done.PollMS < 0 {
			return nil, c.err(k+"poll_ms", "negative")
		}
		if d.Done.PollMS > 0 {
			p.Done.Poll = time.Duration(d.Done.PollMS) * time.Millisecond
		}
		switch p.Done.Method {
		case "opc", "none":
			if p.Done.Query != "" {
				return nil, c.err(k+"query", "only used with method = \"poll\"")
			}
		case "poll":
			if p.Done.Query == "" {
				return nil, c.err(k+"query", "method = \"poll\" needs a query")
			}
			if p.Done.Value == "" {
				return nil, c.err(k+"value", "method = \"poll\" needs the value that means done")
			}
			if err := c.tmpl(k+"query", p.Done.Query, nil); err != nil {
				return nil, err
			}
		default:
			return nil, c.err(k+"method", fmt.Sprintf("%q: want \"opc\", \"poll\" or \"none\"", p.Done.Method))
		}
	}
	const k = t + "data."
	if d.Data.Format == nil {
		return nil, c.err(k+"format", "missing (ascii, int8, int16, uint8, uint16, real32 or real64)")
	}
	enc, err := ParseEncoding(*d.Data.Format)
	if err != nil {
		return nil, c.err(k+"format", err.Error())
	}
	p.Data = DataProfile{Encoding: enc, Scale: d.Data.Scale, ScaleQuery: d.Data.ScaleQuery,
		Offset: d.Data.Offset, OffsetQuery: d.Data.OffsetQuery}
	switch d.Data.ByteOrder {
	case "", "big":
	case "little":
		p.Data.LittleEndian = true
	default:
		return nil, c.err(k+"byte_order", fmt.Sprintf("%q: want \"big\" or \"little\"", d.Data.ByteOrder))
	}
	if d.Data.ByteOrder != "" && (enc == ASCII || enc == Int8 || enc == Uint8) {
		return nil, c.err(k+"byte_order", fmt.Sprintf("means nothing for format %s", enc))
	}
	if (enc == Int8 || enc == Int16 || enc == Uint8 || enc == Uint16) && p.Data.Scale == 0 && p.Data.ScaleQuery == "" {
		return nil, c.err(k+"scale", fmt.Sprintf("format %s needs scale (volts per code) or scale_query", enc))
	}
	if p.Data.ScaleQuery != "" && p.Data.Scale != 0 {
		return nil, c.err(k+"scale", "give scale or scale_query, not both")
	}
	if p.Data.OffsetQuery != "" && p.Data.Offset != 0 {
		return nil, c.err(k+"offset", "give offset or offset_query, not both")
	}
	for _, e := range []error{
		c.tmpl(k+"scale_query", p.Data.ScaleQuery, nil, "ch"),
		c.tmpl(k+"offset_query", p.Data.OffsetQuery, nil, "ch"),
	} {
		if e != nil {
			return nil, e
		}
	}
	return p, nil
}

// placeholders lists the {name} placeholders of a template. Braces must
// pair and names are lower-case letters.
func placeholders(s string) ([]string, error) {
	var out []string
	for i := 0; i < len(s); i++ {
		switch s[i] {
		case '{':
			j := strings.IndexByte(s[i:], '}')
			if j < 0 {
				return nil, fmt.Errorf("unclosed '{' at byte %d", i+1)
			}
			name := s[i+1 : i+j]
			if name == "" || strings.Trim(name, "abcdefghijklmnopqrstuvwxyz_") != "" {
				return nil, fmt.Errorf("bad placeholder {%s}", name)
			}
			out = append(out, name)
			i += j
		case '}':
			return nil, fmt.Errorf("'}' without '{' at byte %d", i+1)
		}
	}
	return out, nil
}

// expand replaces placeholders; kv holds name, value pairs. Templates
// are checked at load, so every name is known.
func expand(t string, kv ...string) string {
	if !strings.Contains(t, "{") {
		return t
	}
	var b strings.Builder
	for i := 0; i < len(t); i++ {
		if t[i] != '{' {
			b.WriteByte(t[i])
			continue
		}
		j := strings.IndexByte(t[i:], '}')
		name := t[i+1 : i+j]
		for k := 0; k+1 < len(kv); k += 2 {
			if kv[k] == name {
				b.WriteString(kv[k+1])
			}
		}
		i += j
	}
	return b.String()
}

// num formats a value for a command: the shortest decimal that reads
// back as the same float64, with an upper-case exponent (IEEE 488.2
// decimal numeric program data, clause 7.7.2; memory).
func num(v float64) string {
	return strings.ToUpper(strconv.FormatFloat(v, 'g', -1, 64))
}

// keyLine finds the line of a dotted key ("digitizer.data.format") in
// TOML source: the line of its "name =" inside the right table, or of
// the table header itself. It returns 0 when not found.
func keyLine(src []byte, key string) int {
	table := ""
	for i, line := range strings.Split(string(src), "\n") {
		l := strings.TrimSpace(line)
		if strings.HasPrefix(l, "#") {
			continue
		}
		if strings.HasPrefix(l, "[") {
			h := strings.TrimLeft(l, "[ ")
			if j := strings.IndexByte(h, ']'); j >= 0 {
				h = h[:j]
			}
			table = strings.TrimSpace(h)
			if table == key {
				return i + 1
			}
			continue
		}
		eq := strings.IndexByte(l, '=')
		if eq <= 0 {
			continue
		}
		name := strings.Trim(strings.TrimSpace(l[:eq]), `"'`)
		if table != "" {
			name = table + "." + name
		}
		if name == key {
			return i + 1
		}
	}
	return 0
}

package sim

import (
	"strconv"
	"strings"
	"unicode"
)

// A program message line holds one or more commands separated by ';'.
// Each command is a header (":"-separated nodes, each a mnemonic with an
// optional numeric suffix, a trailing '?' for a query, or a common
// command "*XXX") and optional comma-separated parameters after white
// space. A header with a leading ':' is taken from the root; one without,
// after ';', first under the previous command's path and then from the
// root (SCPI-1999's compound rule, made lenient).

// command is one parsed command.
type command struct {
	header string   // as sent, for error messages
	nodes  []string // upper-cased mnemonics with suffixes, no leading ':'
	query  bool
	common bool // "*IDN?" and friends: nodes[0] is "*IDN"
	args   []string
	gen    bool // addressed to the generator (else the digitizer)
}

// splitCommands splits a line at ';' outside double-quoted strings.
func splitCommands(line string) []string {
	var out []string
	inQuote := false
	start := 0
	for i := 0; i < len(line); i++ {
		switch line[i] {
		case '"':
			inQuote = !inQuote
		case ';':
			if !inQuote {
				out = append(out, line[start:i])
				start = i + 1
			}
		}
	}
	return append(out, line[start:])
}

// parseCommand parses one command; ok is false for an empty or
// malformed header.
func parseCommand(s string) (command, bool) {
	s = strings.TrimSpace(s)
	if s == "" {
		return command{}, false
	}
	hdr, rest := s, ""
	if i := strings.IndexFunc(s, unicode.IsSpace); i >= 0 {
		hdr, rest = s[:i], strings.TrimSpace(s[i:])
	}
	c := command{header: hdr}
	if strings.HasSuffix(hdr, "?") {
		c.query = true
		hdr = hdr[:len(hdr)-1]
	}
	if strings.HasPrefix(hdr, "*") {
		c.common = true
		if len(hdr) < 2 || !isAlpha(hdr[1:]) {
			return c, false
		}
		c.nodes = []string{strings.ToUpper(hdr)}
	} else {
		hdr = strings.TrimPrefix(hdr, ":")
		if hdr == "" {
			return c, false
		}
		for _, n := range strings.Split(hdr, ":") {
			if n == "" || !validNode(n) {
				return c, false
			}
			c.nodes = append(c.nodes, strings.ToUpper(n))
		}
	}
	if rest != "" {
		for _, a := range strings.Split(rest, ",") {
			c.args = append(c.args, strings.TrimSpace(a))
		}
	}
	return c, true
}

func isAlpha(s string) bool {
	for i := 0; i < len(s); i++ {
		if !(s[i] >= 'A' && s[i] <= 'Z' || s[i] >= 'a' && s[i] <= 'z') {
			return false
		}
	}
	return true
}

// validNode is letters followed by optional digits.
func validNode(n string) bool {
	i := 0
	for i < len(n) && (n[i] >= 'A' && n[i] <= 'Z' || n[i] >= 'a' && n[i] <= 'z') {
		i++
	}
	if i == 0 {
		return false
	}
	for ; i < len(n); i++ {
		if n[i] < '0' || n[i] > '9' {
			return false
		}
	}
	return true
}

// patNode is one node of a header pattern such as "[SOURce#]".
type patNode struct {
	long, short string // upper case
	optional    bool
	suffix      bool
}

// pattern is a compiled header pattern: "[SOURce#]:FREQuency[:CW]".
type pattern []patNode

func compilePattern(p string) pattern {
	var out pattern
	for p != "" {
		opt := false
		if strings.HasPrefix(p, "[") {
			opt = true
			end := strings.Index(p, "]")
			node := strings.TrimPrefix(p[1:end], ":")
			out = append(out, mkNode(node, true))
			p = p[end+1:]
			continue
		}
		p = strings.TrimPrefix(p, ":")
		end := strings.IndexAny(p, ":[")
		if end < 0 {
			end = len(p)
		}
		out = append(out, mkNode(p[:end], opt))
		p = p[end:]
	}
	return out
}

func mkNode(s string, opt bool) patNode {
	n := patNode{optional: opt}
	if strings.HasSuffix(s, "#") {
		n.suffix = true
		s = s[:len(s)-1]
	}
	n.long = strings.ToUpper(s)
	if strings.HasPrefix(s, "*") {
		n.short = n.long // common commands have one form
		return n
	}
	for _, r := range s {
		if unicode.IsUpper(r) {
			n.short += string(r)
		}
	}
	return n
}

// match reports whether nodes fit the pattern, and the numeric suffixes
// of the suffixed pattern nodes in order (1 when left out).
func (p pattern) match(nodes []string) ([]int, bool) {
	var sfx []int
	var rec func(pi, ni int) bool
	rec = func(pi, ni int) bool {
		if pi == len(p) {
			return ni == len(nodes)
		}
		pn := p[pi]
		if ni < len(nodes) {
			if v, ok := pn.matchNode(nodes[ni]); ok {
				if pn.suffix {
					sfx = append(sfx, v)
				}
				if rec(pi+1, ni+1) {
					return true
				}
				if pn.suffix {
					sfx = sfx[:len(sfx)-1]
				}
			}
		}
		if pn.optional {
			if pn.suffix {
				sfx = append(sfx, 1)
			}
			if rec(pi+1, ni) {
				return true
			}
			if pn.suffix {
				sfx = sfx[:len(sfx)-1]
			}
		}
		return false
	}
	if !rec(0, 0) {
		return nil, false
	}
	return sfx, true
}

// matchNode matches one upper-cased node: the short or long form, and
// for a suffixed pattern node an optional decimal suffix.
func (pn patNode) matchNode(n string) (int, bool) {
	i := len(n)
	for i > 0 && n[i-1] >= '0' && n[i-1] <= '9' {
		i--
	}
	mn, digits := n[:i], n[i:]
	if mn != pn.long && mn != pn.short {
		return 0, false
	}
	if digits == "" {
		return 1, true
	}
	if !pn.suffix {
		return 0, false
	}
	v, err := strconv.Atoi(digits)
	if err != nil || v < 1 || v > 99 {
		return 0, false
	}
	return v, true
}

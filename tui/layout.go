package tui

import (
	"strings"

	"github.com/charmbracelet/x/ansi"
)

// fitLine cuts or pads a styled line to exactly w cells.
func fitLine(s string, w int) string {
	n := ansi.StringWidth(s)
	if n > w {
		return ansi.Truncate(s, w, "…")
	}
	return s + strings.Repeat(" ", w-n)
}

// hjoin puts blocks side by side; each block must already be h lines of
// fixed width.
func hjoin(sep string, blocks ...string) string {
	split := make([][]string, len(blocks))
	h := 0
	for i, b := range blocks {
		split[i] = strings.Split(b, "\n")
		h = max(h, len(split[i]))
	}
	var out strings.Builder
	for r := 0; r < h; r++ {
		for i, lines := range split {
			if i > 0 {
				out.WriteString(sep)
			}
			if r < len(lines) {
				out.WriteString(lines[r])
			}
		}
		if r < h-1 {
			out.WriteByte('\n')
		}
	}
	return out.String()
}

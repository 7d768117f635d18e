package tui

import "strings"

// A braille canvas. Each terminal cell holds a 2×4 grid of dots (Unicode
// braille patterns, U+2800–U+28FF), so a w×h-cell canvas has 2w×4h dots.
// It is hand-written rather than taken from a library: it is about a
// hundred lines, it lets each cell carry a drawing class (data, grid,
// reference, marker) that decides its style, lets a marker glyph replace a
// cell so point quality stays visible without colour, and it renders a
// row as runs of one class so a frame costs a few string appends per run.

// class is what a cell shows; a higher class wins when two share a cell.
type class uint8

const (
	clsEmpty   class = iota
	clsGrid          // decade grid
	clsRef           // 0 dB and −180° reference lines
	clsErr           // uncertainty bars
	clsMargin        // the margin segments at crossovers
	clsData          // the response curve and good points
	clsRetried       // a point that needed more than one attempt
	clsFlagged       // a point that stayed bad
	clsActive        // the point being measured now
	clsCursor        // the selected point
	numClasses
)

// brailleBit[y][x] is the dot bit for dot column x (0..1) and row y (0..3)
// of a cell, from the Unicode braille pattern layout (dots 1-2-3-7 on the
// left, 4-5-6-8 on the right).
var brailleBit = [4][2]uint8{
	{0x01, 0x08},
	{0x02, 0x10},
	{0x04, 0x20},
	{0x40, 0x80},
}

type canvas struct {
	w, h  int // cells
	dots  []uint8
	cls   []class
	glyph []rune // a marker replacing the braille dots; 0 for none
}

func newCanvas(w, h int) *canvas {
	if w < 0 {
		w = 0
	}
	if h < 0 {
		h = 0
	}
	n := w * h
	return &canvas{w: w, h: h, dots: make([]uint8, n), cls: make([]class, n), glyph: make([]rune, n)}
}

// dotW and dotH are the canvas size in dots.
func (c *canvas) dotW() int { return 2 * c.w }
func (c *canvas) dotH() int { return 4 * c.h }

// set lights the dot at (x, y), y counted down from the top; dots off the
// canvas are ignored.
func (c *canvas) set(x, y int, k class) {
	if x < 0 || y < 0 || x >= 2*c.w || y >= 4*c.h {
		return
	}
	i := (y/4)*c.w + x/2
	c.dots[i] |= brailleBit[y%4][x%2]
	if k > c.cls[i] {
		c.cls[i] = k
	}
}

// line draws a straight line of dots between two dot positions
// (Bresenham's algorithm).
func (c *canvas) line(x0, y0, x1, y1 int, k class) {
	dx, dy := abs(x1-x0), -abs(y1-y0)
	sx, sy := 1, 1
	if x0 > x1 {
		sx = -1
	}
	if y0 > y1 {
		sy = -1
	}
	e := dx + dy
	// Lines far outside the canvas are clipped by set; cap the length so
	// a wild value cannot make a frame slow.
	for n := 0; n < 4*(c.w+c.h)+8; n++ {
		c.set(x0, y0, k)
		if x0 == x1 && y0 == y1 {
			return
		}
		e2 := 2 * e
		if e2 >= dy {
			e += dy
			x0 += sx
		}
		if e2 <= dx {
			e += dx
			y0 += sy
		}
	}
}

// hdash draws a dashed horizontal line at dot row y, one dot in every
// step.
func (c *canvas) hdash(y, step int, k class) {
	for x := 0; x < 2*c.w; x += step {
		c.set(x, y, k)
	}
}

// vdash draws a dashed vertical line at dot column x.
func (c *canvas) vdash(x, step int, k class) {
	for y := 0; y < 4*c.h; y += step {
		c.set(x, y, k)
	}
}

// mark puts glyph g in the cell holding dot (x, y) when k outranks what
// is there already.
func (c *canvas) mark(x, y int, g rune, k class) {
	if x < 0 || y < 0 || x >= 2*c.w || y >= 4*c.h {
		return
	}
	i := (y/4)*c.w + x/2
	if c.glyph[i] != 0 && k < c.cls[i] {
		return
	}
	c.glyph[i] = g
	if k > c.cls[i] {
		c.cls[i] = k
	}
}

// paint holds one class's escape sequences, split from a styled sample so
// a run of cells costs two appends.
type paint struct{ pre, post string }

// rows renders the canvas, one string per cell row.
func (c *canvas) rows(p *[numClasses]paint) []string {
	out := make([]string, c.h)
	var b strings.Builder
	for r := 0; r < c.h; r++ {
		b.Reset()
		b.Grow(c.w * 4)
		run := class(255)
		for x := 0; x < c.w; x++ {
			i := r*c.w + x
			k := c.cls[i]
			if c.dots[i] == 0 && c.glyph[i] == 0 {
				k = clsEmpty
			}
			if k != run {
				if run != 255 {
					b.WriteString(p[run].post)
				}
				b.WriteString(p[k].pre)
				run = k
			}
			switch {
			case c.glyph[i] != 0:
				b.WriteRune(c.glyph[i])
			case c.dots[i] == 0:
				b.WriteByte(' ')
			default:
				b.WriteRune(rune(0x2800 + int(c.dots[i])))
			}
		}
		if run != 255 {
			b.WriteString(p[run].post)
		}
		out[r] = b.String()
	}
	return out
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

package tui

import "testing"

// The braille code points are from the Unicode standard's Braille
// Patterns block: U+2800 is blank and dot n adds bit n−1, so dots 1..8
// are 0x01, 0x02, 0x04, 0x08, 0x10, 0x20, 0x40, 0x80 with dots 1, 2, 3, 7
// in the left column top to bottom and 4, 5, 6, 8 in the right.
func TestCanvasBrailleDots(t *testing.T) {
	var noPaint [numClasses]paint
	tests := []struct {
		name string
		x, y int
		want rune
	}{
		{"dot 1 top left", 0, 0, '⠁'},     // U+2801
		{"dot 4 top right", 1, 0, '⠈'},    // U+2808
		{"dot 3 left row 3", 0, 2, '⠄'},   // U+2804
		{"dot 7 bottom left", 0, 3, '⡀'},  // U+2840
		{"dot 8 bottom right", 1, 3, '⢀'}, // U+2880
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c := newCanvas(1, 1)
			c.set(tt.x, tt.y, clsData)
			got := []rune(c.rows(&noPaint)[0])
			if len(got) != 1 || got[0] != tt.want {
				t.Errorf("dot (%d,%d): got %q, want %q", tt.x, tt.y, string(got), string(tt.want))
			}
		})
	}
}

func TestCanvasFullCellAndLine(t *testing.T) {
	var noPaint [numClasses]paint
	c := newCanvas(2, 1)
	// A vertical line down the left column of cell 0 is dots 1,2,3,7:
	// U+2847 (Unicode Braille Patterns).
	c.line(0, 0, 0, 3, clsData)
	// A horizontal line across both columns of the top row of cell 1 is
	// dots 1 and 4: U+2809.
	c.line(2, 0, 3, 0, clsData)
	if got, want := c.rows(&noPaint)[0], "⡇⠉"; got != want {
		t.Errorf("got %q, want %q", got, want)
	}
}

func TestCanvasClipsAndMarks(t *testing.T) {
	var noPaint [numClasses]paint
	c := newCanvas(3, 2)
	c.set(-1, 0, clsData)
	c.set(6, 0, clsData)
	c.set(0, 8, clsData)
	c.line(-100, -100, 100, 100, clsData) // clipped, must not hang
	c.mark(2, 4, 'x', clsFlagged)
	c.mark(2, 4, 'o', clsRetried) // lower class: keeps 'x'
	rows := c.rows(&noPaint)
	if got := []rune(rows[1])[1]; got != 'x' {
		t.Errorf("marker cell: got %q, want 'x'", got)
	}
	if len(rows) != 2 || len([]rune(rows[0])) != 3 {
		t.Errorf("canvas shape: got %d rows %q", len(rows), rows)
	}
}

func TestCanvasPaintRuns(t *testing.T) {
	var p [numClasses]paint
	p[clsData] = paint{"<", ">"}
	p[clsEmpty] = paint{"", ""}
	c := newCanvas(4, 1)
	c.set(0, 0, clsData)
	c.set(2, 0, clsData)
	c.set(3, 0, clsData)
	// Cells 0 and 1 hold data, 2 and 3 are empty: one run for both data
	// cells, then the blanks unpainted.
	if got, want := c.rows(&p)[0], "<⠁⠉>  "; got != want {
		t.Errorf("got %q, want %q", got, want)
	}
}

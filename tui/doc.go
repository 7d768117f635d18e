// Package tui is the live bench screen: a Bubble Tea program that shows
// the sweep as it runs — a Bode plot drawn in braille cells, the margins
// with their uncertainties, a table of points and a status line — and
// turns keys into engine commands. It never speaks SCPI: it reads
// sweep.Events from a channel and calls a small Controller.
package tui

// Package sim is the simulated bench: a real SCPI server on loopback that
// serves a signal generator and a two-channel digitizer whose records
// come from a small-signal model of a switching converter's loop.
//
// sim does not import instr: server and client are written independently
// so one cannot mask the other's protocol bug.
package sim

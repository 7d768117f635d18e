// Package instr talks to bench instruments: transports (TCP raw socket,
// serial, USBTMC), a SCPI line layer with deadlines, IEEE 488.2 block
// data, and profile-driven generator and digitizer drivers.
package instr

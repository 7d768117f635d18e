#!/bin/sh
# Runs every netlist here through ngspice in batch mode; each writes
# NAME.txt with three columns: frequency (Hz), Re L, Im L. The test
# TestNgspiceAC in package sim does the same and compares with the model;
# it also regenerates these netlists from the scenarios with -update:
#   go test ./sim -run NgspiceAC -args -update
set -e
cd "$(dirname "$0")"
for f in *.cir; do
	ngspice -b "$f" >/dev/null
	echo "${f%.cir}.txt"
done

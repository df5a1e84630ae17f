// Package spicecheck holds the permanent cross-check of the timing model
// (padline/sequences/timing) against ngspice, a general-purpose circuit
// simulator: its tests render the readable netlist testdata/race.cir for a
// circuit, run `ngspice -b`, parse the .meas results and compare them with
// the model. The package has no code of its own; it exists so that
// sequences/timing stays free of I/O and the simulator and the model never
// call each other (only the test calls both).
//
// Without ngspice on PATH the tests skip with one line, unless
// PADLINE_REQUIRE_PARTS=1 (then they fail): CI installs it.
package spicecheck

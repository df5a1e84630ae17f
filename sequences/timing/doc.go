// Package timing is the closed-form timing model of an RC-race touch switch
// (DEVELOPERS.md "Physics") and the tolerance analysis built on it (§7): toleranced
// circuit values, the Schmitt RC oscillator, the sense-node race and its trip
// capacitance, worst-case corners, a seeded Monte Carlo, the spec window, the
// ISO 14253-1 guard band and the resulting test limits, and the design's
// predicted Cpk and yield. Gates need not be ideal: an output resistance in
// series with R_o and R_s, a ramped clock edge whose (loaded) threshold
// crossing starts the race, and figures by supply voltage ([SupplyTable]);
// [Report] ranks the inputs by their effect on the trip point and warns when
// the race lasts only a few edge times. The package spicecheck below this
// one cross-checks the model against ngspice.
//
// It is pure: no I/O, no clocks, no configuration. It must not import any
// other padline package (and in particular fixture/sim must not import it:
// the simulator and this model are two independent computations that tests
// compare).
//
// Units: values in a [Circuit] and a [Point] carry their unit in the field
// name (V, ohm, F, pF, ns, or a fraction of the supply). Capacitances in
// results are in pF, frequencies in Hz, times in seconds.
package timing

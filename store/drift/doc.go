// Package drift watches trip-point history for drift: Shewhart charts
// (individuals/moving range, X̄-R, X̄-S) with the Western Electric and
// Nelson run rules, EWMA and tabular CUSUM for small shifts, process
// capability (Cp, Cpk, Pp, Ppk), first-pass yield with exact
// Clopper–Pearson bounds, and a seeded simulation of run lengths.
//
// Everything here is a pure function of the numbers handed in: limits are
// estimated from a stated baseline window (phase I) and applied to the whole
// series (phase II); every result carries that window so it can be printed.
//
// drift owns the statistics only. It must not import any other padline
// package (no store, no sequences, no fixture) and never touches a database,
// a file or a clock; rendering lives in drift/chart.
package drift

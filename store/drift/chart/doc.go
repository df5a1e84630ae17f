// Package chart renders drift charts to SVG or PNG with gonum/plot for
// people to read: the statistic against time of day (or serial) with the
// shift changes dotted, its centre line (solid), limits (dashed), zone
// lines (dotted) and the baseline window shaded light grey; each run of
// alarms marked once, its first alarm ringed and its span barred, numbered
// as the text lists them where the numbers have room; a CUSUM drawn to
// ±3h. Several groups are small multiples in one picture. A long series is
// drawn through its M4 reduction (every alarm and the envelope kept, see
// drawn), without dots. The fail-code Pareto and the hourly first-pass
// yield are drawn here too. The styling reads in grey print: line styles,
// not colours, tell the lines apart, and PNGs are 8-bit grey.
//
// chart owns drawing only; it imports store/drift for the chart types and
// the yield interval, and nothing else of padline's.
package chart

// Package chart renders drift charts to SVG or PNG with gonum/plot: the
// statistic with its centre line (solid), limits (dashed), zone lines
// (dotted), the baseline window shaded light grey, and every alarm ringed
// and labelled with the number it carries in the text output. The styling
// reads in grey print: line styles, not colours, tell the lines apart.
//
// chart owns drawing only; it imports store/drift for the chart types and
// nothing else of padline's, and computes no statistics.
package chart

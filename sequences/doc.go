// Package sequences runs plans: the ordered steps applied to every unit of a
// variant, the trip search on the ladder, verdicts and fail codes.
//
// It reaches hardware only through small interfaces declared here and time
// only through an injected clock; it records runs through an interface that
// the store satisfies. It never imports periph.io/x/host/v3, database/sql or
// viper.
package sequences

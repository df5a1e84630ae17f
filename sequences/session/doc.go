// Package session is the station session: the one loop under every screen.
//
// It owns the variant and station files (typed, validated; viper reads the
// YAML), the rig that opens a station for one variant (load → limits → pins
// → fixture → plan, written once for run, station check and demo), the
// production gate, the per-unit loop, the commit of each run, relay wear
// and the reference-check run, and an event stream any number of consumers
// subscribe to (the terminal of 'padline run', a station screen, plant
// forwarding). See DEVELOPERS.md "The station session".
//
// It must not import periph.io/x/host/v3 (a GPIO station's pins come
// through a GPIOOpener the caller passes) nor cmd.
package session

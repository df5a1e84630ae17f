// Package screen is the technician's station screen: a page the station
// serves itself over net/http, with its HTML, CSS and JavaScript embedded
// and live updates sent as server-sent events.
//
// The screen is one consumer of the station session's event stream. Reduce
// turns each event into the screen's State (a pure function, tested per
// event type without a browser); Server holds the current State, sends it
// to every open page, and hands what the technician does on the page
// (scans, starting the shift-start check, acknowledging a repeat scan) back
// to the session as Inputs. Every state-changing request is a POST carrying
// the token of this start of the program.
//
// It takes events, the station file and the shift log's earlier runs from
// the session package (sequences/session) and fail-code advice from
// sequences. It never reaches periph.io/x/host (CI checks it, like every
// package under sequences) and runs no SQL of its own. Its subpackage
// screentest starts Chromium for the browser tests and is imported by
// tests only.
package screen

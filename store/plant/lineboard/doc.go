// Package lineboard serves the line board: a read-only web page over every
// station of a line or the whole plant, from the plant store — last unit,
// first-pass yield this shift, shift-start check due, relay wear, open
// drift alarms and forwarding backlog — kept live by server-sent events.
//
// It uses net/http and embedded assets only, and reads through
// store/plant; it runs no SQL of its own and writes nothing.
package lineboard

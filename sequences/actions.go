package sequences

// CodeAdvice is what a fail code tells the technician: what the unit (or
// the station) did, and what to do about it. It is the one copy of this
// text in the code; the README's fail-code tables say the same words, and a
// test keeps the two equal.
type CodeAdvice struct {
	// Means says what the unit did, or for a station fault what happened
	// at the station.
	Means string
	// Do is the technician's next action, in plain words.
	Do string
	// StationFault is true for the station's own faults: the unit is not
	// judged.
	StationFault bool
}

// codeAdvice holds the README's "Fail codes" tables.
var codeAdvice = map[FailCode]CodeAdvice{
	CodeClockDead: {
		Means: "shows no oscillator edges at its clock test point",
		Do:    "check supply and the Schmitt oscillator parts; repair, retest",
	},
	CodeClockLow: {
		Means: "oscillates outside the frequency its tolerances allow",
		Do:    "check the timing R and C against the BOM; quarantine the reel if several fail",
	},
	CodeClockHigh: {
		Means: "oscillates outside the frequency its tolerances allow",
		Do:    "check the timing R and C against the BOM; quarantine the reel if several fail",
	},
	CodeIdleLatched: {
		Means: "latches with nothing on the pad",
		Do:    "inspect the sense resistor and flip-flop; scrap or repair",
	},
	CodeStuckLatched: {
		Means: "latches but does not let go when the ladder opens",
		Do:    "replace the flip-flop; retest",
	},
	CodeNoTrip: {
		Means: "never latches, even with the whole ladder on the pad",
		Do:    "inspect the pad connection; if several units in a row show it, check the fixture's pad pin",
	},
	CodeTripLow: {
		Means: "trips below the low test limit",
		Do:    "check pad laminate and sense resistor value",
	},
	CodeTripHigh: {
		Means: "trips above the high test limit",
		Do:    "clean flux residue; check the clock-path delay parts",
	},
	CodeTripNoisy: {
		Means: "has no single sharp trip point",
		Do:    "reflow and inspect the pad and sense resistor joints; retest once",
	},
	CodeLidOpen: {
		Means:        "the lid opened during the test or was never closed",
		Do:           "close the lid and scan the unit again",
		StationFault: true,
	},
	CodePinError: {
		Means:        "a GPIO line of the fixture failed; the message names the pin",
		Do:           "check that pin's wiring and driver, then scan the unit again",
		StationFault: true,
	},
	CodeStepTimeout: {
		Means:        "a step overran its time budget",
		Do:           "check the fixture (relays, clamp, unit contact), then scan the unit again",
		StationFault: true,
	},
	CodeStationError: {
		Means:        "the station could not finish the test",
		Do:           "read the station's message in the log; fix the station, then scan the unit again",
		StationFault: true,
	},
}

// Advice returns what fail code means and what the technician does about
// it; ok is false for a code the README does not list.
func Advice(code FailCode) (a CodeAdvice, ok bool) {
	a, ok = codeAdvice[code]
	return a, ok
}

// FailAction is the technician's action for a fail or station-fault code
// (Advice's Do), "" for an unknown code and for a pass, which has none.
func FailAction(code FailCode) string { return codeAdvice[code].Do }

// AdviceCodes lists every fail code that has advice, unit codes first, in
// the README's order.
func AdviceCodes() []FailCode {
	return []FailCode{
		CodeClockDead, CodeClockLow, CodeClockHigh, CodeIdleLatched, CodeStuckLatched,
		CodeNoTrip, CodeTripLow, CodeTripHigh, CodeTripNoisy,
		CodeLidOpen, CodePinError, CodeStepTimeout, CodeStationError,
	}
}

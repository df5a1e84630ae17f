package sequences

// failActions is what a technician does about each fail code: the "what to
// do" column of the fail-code table in the README, word for word.
var failActions = map[FailCode]string{
	CodeClockDead:    "check supply and the Schmitt oscillator parts; repair, retest",
	CodeClockLow:     "check the timing R and C against the BOM; quarantine the reel if several fail",
	CodeClockHigh:    "check the timing R and C against the BOM; quarantine the reel if several fail",
	CodeIdleLatched:  "inspect the sense resistor and flip-flop; scrap or repair",
	CodeStuckLatched: "replace the flip-flop; retest",
	CodeNoTrip:       "inspect the pad connection; if several units in a row show it, check the fixture's pad pin",
	CodeTripLow:      "check pad laminate and sense resistor value",
	CodeTripHigh:     "clean flux residue; check the clock-path delay parts",
	CodeTripNoisy:    "reflow and inspect the pad and sense resistor joints; retest once",
	CodeLidOpen:      "close the lid and rescan",
	CodePinError:     "a GPIO line failed: the message names the pin; check the wiring",
	CodeStepTimeout:  "a step overran its budget: check the fixture",
	CodeStationError: "read the message; the station, not the unit, failed",
}

// FailAction is the technician's action for a fail or station-fault code,
// "" for an unknown code (and for a pass, which has none).
func FailAction(code FailCode) string { return failActions[code] }

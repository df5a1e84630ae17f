package main

import (
	"padline/fixture"
	"padline/fixture/hostpins"
	"padline/sequences/session"
)

// openGPIO opens a gpio station's pins through fixture/hostpins, the one
// package that reaches periph.io/x/host/v3.
func openGPIO(p session.StationPins) (fixture.Pins, error) {
	return hostpins.Open(hostpins.RoleMap{
		Latch: p.Latch, Power: p.Power, Clock: p.Clock, Lid: p.Lid,
		PassLamp: p.PassLamp, FailLamp: p.FailLamp, Ladder: p.Ladder,
	})
}

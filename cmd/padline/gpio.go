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

// openPanelGPIO opens a gpio panel station's lines through
// fixture/hostpins.
func openPanelGPIO(st *session.Station) (fixture.PanelPins, error) {
	roles := hostpins.PanelRoleMap{Lid: st.Pins.Lid, PassLamp: st.Pins.PassLamp, FailLamp: st.Pins.FailLamp}
	if st.Sites.SharedPower {
		roles.Power = st.Pins.Power
	}
	if st.Sites.Ganged {
		roles.Ladder = st.Pins.Ladder
	}
	for _, s := range st.Sites.List {
		roles.Sites = append(roles.Sites, hostpins.SiteRoles{Latch: s.Latch, Clock: s.Clock, Power: s.Power, Ladder: s.Ladder})
	}
	return hostpins.OpenPanel(roles)
}

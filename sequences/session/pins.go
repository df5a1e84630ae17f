package session

import (
	"fmt"

	"padline/fixture"
	"padline/fixture/sim"
)

// GPIOOpener opens a station's real pins by their line names. The session
// package may not reach periph.io/x/host/v3 (only fixture/hostpins does, and
// CI checks that nothing under sequences/ pulls it in), so the program that
// runs on a station passes one built on hostpins.Open; tests pass a fake.
type GPIOOpener func(pins StationPins) (fixture.Pins, error)

// OpenPins opens the station's pins: for driver: sim the simulated line's
// (returned, so a caller can load units into it), for driver: gpio the real
// lines named in the station file, through gpio. A gpio station without an
// opener is an error naming the station file.
func OpenPins(st *Station, v *Variant, gpio GPIOOpener) (fixture.Pins, fixture.Clock, *sim.Line, error) {
	if st.Driver == DriverSim {
		line, err := NewSimLine(st, v)
		if err != nil {
			return fixture.Pins{}, nil, nil, err
		}
		return line.Pins(), line.Clock(), line, nil
	}
	if gpio == nil {
		return fixture.Pins{}, nil, nil, fmt.Errorf("station %s: driver %s: this program cannot open GPIO pins", st.Source.Name, st.Driver)
	}
	pins, err := gpio(st.Pins)
	if err != nil {
		return fixture.Pins{}, nil, nil, fmt.Errorf("station %s: %w", st.Source.Name, err)
	}
	return pins, fixture.WallClock{}, nil, nil
}

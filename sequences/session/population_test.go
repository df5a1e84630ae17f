package session_test

import (
	"fmt"
	"math"
	"strings"
	"testing"

	"padline/fixture/sim"
	"padline/sequences/session"
	"padline/sequences/timing"
)

// The simulator and the timing model compute one physics twice, neither
// calling the other (fixture/sim never imports sequences/timing). Good
// simulated units of each demo variant must trip where the model's Monte
// Carlo says: mean within 5 standard errors of the difference, standard
// deviation within 10 %, and no unit outside the model's worst-case
// corners.
func TestPopulationSimulatorAgainstModel(t *testing.T) {
	const units = 4000
	for _, name := range session.BuiltinVariants() {
		t.Run(name, func(t *testing.T) {
			v, st, err := session.Load(name, "demo-sim")
			if err != nil {
				t.Fatal(err)
			}
			for d := range st.Sim.DefectRates {
				st.Sim.DefectRates[d] = 0 // good units only
			}
			line, err := session.NewSimLine(st, v)
			if err != nil {
				t.Fatal(err)
			}
			rep, err := v.Limits(timing.Options{Draws: 20000, Seed: 7, UncertaintyPF: 0.3})
			if err != nil {
				t.Fatal(err)
			}
			var sum, ss float64
			outside := 0
			prefix := strings.ReplaceAll(v.Name, "-", "")
			for i := range units {
				tr := line.Draw(fmt.Sprintf("%s-%06d", prefix, i+1)).Truth()
				if tr.Trip != sim.TripsAt {
					t.Fatalf("good unit %d does not trip (%v)", i+1, tr.Trip)
				}
				x := tr.TripPF
				sum += x
				ss += x * x
				// The corners bound every unit (they are the extremes over
				// the tolerance box); allow float rounding only.
				if x < rep.Trip.CornerLow-1e-9 || x > rep.Trip.CornerHigh+1e-9 {
					outside++
				}
			}
			mean := sum / units
			sd := math.Sqrt(ss/units - mean*mean)
			se := math.Sqrt(sd*sd/units + rep.Trip.MCSD*rep.Trip.MCSD/float64(rep.Draws))
			t.Logf("%s: simulator %.3f ± %.3f pF, model %.3f ± %.3f pF, corners %.2f…%.2f", name, mean, sd, rep.Trip.MCMean, rep.Trip.MCSD, rep.Trip.CornerLow, rep.Trip.CornerHigh)
			if d := math.Abs(mean - rep.Trip.MCMean); d > 5*se {
				t.Errorf("mean %.3f vs model %.3f: %.3f pF apart, more than 5 SE (%.3f)", mean, rep.Trip.MCMean, d, 5*se)
			}
			if r := sd / rep.Trip.MCSD; r < 0.9 || r > 1.1 {
				t.Errorf("sd %.3f vs model %.3f: ratio %.3f outside 0.9…1.1", sd, rep.Trip.MCSD, r)
			}
			if outside > 0 {
				t.Errorf("%d of %d units outside the model's corners", outside, units)
			}
		})
	}
}

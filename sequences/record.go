package sequences

import (
	"context"
	"math"
	"time"
)

// Verdict is the outcome of one unit's run.
type Verdict string

// The three verdicts. StationFault means the station, not the unit, is at
// fault (pin error, lid opened mid-test, timeout); it is never a unit fail.
const (
	Pass         Verdict = "pass"
	Fail         Verdict = "fail"
	StationFault Verdict = "station-fault"
)

// Measurement is one named value a step recorded, with its limits and
// verdict. Low or High is NaN when that side has no limit.
type Measurement struct {
	Step    StepName
	Name    Quantity
	Value   float64
	Unit    string
	Low     float64
	High    float64
	Verdict Verdict
}

// NoLimit marks a missing low or high limit.
var NoLimit = math.NaN()

// Run is everything recorded about one test of one unit.
type Run struct {
	Serial       string
	Variant      string
	ConfigHash   string
	Station      string
	Fixture      string
	Operator     string
	Lot          string
	Software     string
	Started      time.Time
	Finished     time.Time
	Verdict      Verdict
	FailCode     FailCode
	Measurements []Measurement
	// Driver is the station driver that produced the run ("sim" for the
	// simulated line, "gpio" for real pins).
	Driver string
	// Fault is the station fault's message on a station-fault verdict
	// (the pin or step at fault), "" otherwise.
	Fault string
	// Panel is the label of the panel the unit was tested on and Site its
	// board position there (1-based); "" and 0 for a unit tested alone.
	Panel string
	Site  int
}

// Recorder commits a finished run to durable storage. It returns only after
// the run is committed; a verdict is shown to the operator only after that.
// *store.DB satisfies it.
type Recorder interface {
	Record(ctx context.Context, r *Run) (id int64, err error)
}

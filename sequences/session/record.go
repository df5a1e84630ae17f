package session

import (
	"math"
	"padline/sequences"
	"time"
)

// Record is the committed unit as one flat JSON object (what 'padline run
// --json' prints): shift-log id, serial, verdict, fail code, fixture time,
// prior fails and the plan's headline measurements (null when NaN).
func (v *Verdict) Record() map[string]any {
	r := v.Run
	m := map[string]any{
		"id": v.ID, "serial": r.Serial, "verdict": r.Verdict, "fail_code": r.FailCode,
		"fixture_ms": float64(r.Finished.Sub(r.Started)) / float64(time.Millisecond), "prior_fails": v.PriorFails,
	}
	for _, x := range r.Measurements {
		switch x.Name {
		case sequences.MeasTripPF, sequences.MeasTripSEPF, sequences.MeasSpreadPF, sequences.MeasClockHz:
			m[string(x.Name)] = jsonNum(x.Value)
		}
	}
	return m
}

// jsonNum is f for JSON, or nil (null) when f is NaN.
func jsonNum(f float64) any {
	if math.IsNaN(f) {
		return nil
	}
	return f
}

package session

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"slices"
	"sort"
	"strings"
	"time"

	"padline/fixture/sim"
	"padline/sequences"
	"padline/store"
)

// Station trust: 'padline station check|study|status', the station file's
// reference units, and the gate 'padline run' passes before every unit.

const (
	// defaultCalUncertaintyPF is one rung's calibration standard
	// uncertainty when the station file does not state it: the σ of an
	// LCR-meter reading at these values (DEVELOPERS.md "Simulator realism floor").
	defaultCalUncertaintyPF = 0.05
	// defaultRelayWarnFraction is the fraction of rated relay life at which
	// status warns.
	defaultRelayWarnFraction = 0.8
)

// ErrNotReady is wrapped by every refusal of the gate.
var ErrNotReady = errors.New("station not ready")

// StationRef is one reference unit of a station file.
type StationRef struct {
	sequences.Reference
	// SimDefects are the simulator defects the unit is built with (driver
	// sim only): a high-trip reference is a QM-205 board with a slowed
	// clock path, which the simulator models as its slow_gate defect.
	SimDefects []string
}

// readStationTrust reads reference_units, check_every_units,
// check_every_hours and relay_warn_fraction. A reference trip must lie at
// least sequences.CheckWindowPF inside the ladder's range (stray to stray + every
// rung), where the check can search it.
func readStationTrust(d *doc, lad StationLadder) StationTrust {
	tr := StationTrust{RelayWarnFraction: defaultRelayWarnFraction}
	if v, ok := d.lookup("reference_units"); ok {
		items, isList := v.([]any)
		if !isList {
			d.fail("reference_units", "want a list of {serial, trip_pf, allowed_dev_pf}, got %s", describeValue(v))
		}
		seen := map[string]bool{}
		for i, it := range items {
			key := fmtIndex("reference_units", i)
			m, isMap := it.(map[string]any)
			if !isMap {
				d.fail(key, "want {serial, trip_pf, allowed_dev_pf}, got %s", describeValue(it))
				continue
			}
			keys := make([]string, 0, len(m))
			for k := range m {
				keys = append(keys, k)
			}
			sort.Strings(keys)
			for _, k := range keys {
				if !slices.Contains([]string{"serial", "trip_pf", "allowed_dev_pf", "lab_trip_pf", "lab_u_pf", "sim_defects"}, k) {
					d.fail(key, "unknown key %s (want serial, trip_pf, allowed_dev_pf, lab_trip_pf, lab_u_pf, sim_defects)", k)
				}
			}
			var r StationRef
			serial, isStr := m["serial"].(string)
			switch {
			case m["serial"] == nil:
				d.fail(key, "missing key serial")
			case !isStr || strings.TrimSpace(serial) == "":
				d.fail(key+".serial", "want the reference unit's serial, got %s", describeValue(m["serial"]))
			case seen[serial]:
				d.fail(key+".serial", "%s is registered twice", serial)
			}
			seen[serial] = true
			r.Serial = serial
			num := func(k string) float64 {
				x, present := m[k]
				if !present || x == nil {
					d.fail(key, "missing key %s", k)
					return 0
				}
				f, isNum := asNumber(x)
				if !isNum || f <= 0 {
					d.fail(key+"."+k, "want a number > 0, got %s", describeValue(x))
				} else {
					d.plausible(key+"."+k, f)
				}
				return f
			}
			r.TripPF = num("trip_pf")
			r.AllowedDevPF = num("allowed_dev_pf")
			// lab_trip_pf and lab_u_pf come together: the trip point as
			// capacitance at the pad against a calibrated standard, and its
			// standard uncertainty; the check then measures the fixture's
			// offset from it.
			_, hasLab := m["lab_trip_pf"]
			_, hasLabU := m["lab_u_pf"]
			switch {
			case hasLab && hasLabU:
				r.LabTripPF, r.LabUPF = num("lab_trip_pf"), num("lab_u_pf")
			case hasLab:
				d.fail(key, "lab_trip_pf without lab_u_pf (the lab value's standard uncertainty, pF)")
			case hasLabU:
				d.fail(key, "lab_u_pf without lab_trip_pf")
			}
			if lo, hi := lad.StrayPF+sequences.CheckWindowPF, lad.StrayPF+sumPF(lad.RungsPF)-sequences.CheckWindowPF; len(lad.RungsPF) > 0 && r.TripPF > 0 && (r.TripPF < lo || r.TripPF > hi) {
				d.fail(key+".trip_pf", "%g pF is outside the ladder's reach for a check (%.2f to %.2f pF: %g pF inside stray and full ladder)", r.TripPF, lo, hi, sequences.CheckWindowPF)
			}
			if x, present := m["sim_defects"]; present {
				l, isList := x.([]any)
				if !isList {
					d.fail(key+".sim_defects", "want a list of simulator defect names, got %s", describeValue(x))
				}
				for j, e := range l {
					name, _ := e.(string)
					if !slices.Contains(sim.DefectNames(), name) {
						d.fail(fmtIndex(key+".sim_defects", j), "want one of %s, got %s", strings.Join(sim.DefectNames(), ", "), describeValue(e))
					}
					r.SimDefects = append(r.SimDefects, name)
				}
			}
			tr.References = append(tr.References, r)
		}
	}
	tr.CheckEveryUnits = d.count("check_every_units", 1, 0)
	// At most 30 days: a check schedule longer than that is a typo (and
	// hours beyond ~2.5e6 overflow a time.Duration).
	tr.CheckEveryHours = d.atMost("check_every_hours", d.positive("check_every_hours", false, 0), 720)
	if f, ok := d.num("relay_warn_fraction", false, defaultRelayWarnFraction); ok {
		if !(f > 0 && f <= 1) {
			d.fail("relay_warn_fraction", "must be a fraction in (0, 1], got %g", f)
		}
		tr.RelayWarnFraction = f
	}
	return tr
}

func sumPF(xs []float64) float64 {
	var s float64
	for _, x := range xs {
		s += x
	}
	return s
}

// stationRefArg is how a command line names the station: the path, or the
// built-in's name.
func stationRefArg(st *Station) string { return strings.TrimPrefix(st.Source.Name, "built-in ") }

// CheckHint is the command that clears a refusal.
func CheckHint(variant string, st *Station, dbPath string) string {
	return fmt.Sprintf("run 'padline station check --variant %s --station %s --db %s'", variant, stationRefArg(st), dbPath)
}

// Ready is the gate in front of production units: it refuses when
// the shift log holds no check of this station and fixture, the last check
// refused the station, the station file changed since, the check is older
// than check_every_hours, or check_every_units runs were tested since it.
//
// It also refuses (with ErrClockBehind, which a check does not clear) when
// the wall clock reads earlier than the latest time in the shift log.
func Ready(ctx context.Context, db *store.DB, st *Station, now time.Time) error {
	return ready(ctx, db, st, now, func(ctx context.Context, db *store.DB, st *Station, c store.StationCheck) (int64, error) {
		return db.RunsSince(ctx, st.Name, st.Fixture, c.LastRunID)
	})
}

// ErrClockBehind: the station's wall clock reads earlier than an event in
// its shift log.
var ErrClockBehind = errors.New("station clock behind the shift log")

// clockSkew is how far the wall clock may read behind the shift log's
// latest event before the gate refuses: stations sharing a log on one
// network keep their clocks far closer than this with NTP (common practice,
// no source).
const clockSkew = 2 * time.Minute

// sinceCounter counts the runs tested since check c.
type sinceCounter func(ctx context.Context, db *store.DB, st *Station, c store.StationCheck) (int64, error)

func ready(ctx context.Context, db *store.DB, st *Station, now time.Time, since sinceCounter) error {
	// The gate is a few quick reads; a stop request must not turn it into
	// an error (the caller checks for one before every unit anyway).
	ctx = context.WithoutCancel(ctx)
	latest, err := db.LatestTime(ctx)
	if err != nil {
		return err
	}
	if now.Add(clockSkew).Before(latest) {
		return fmt.Errorf("%w: the clock reads %s but shift log %s holds an event of %s: the clock was set back, so the check schedule cannot be trusted; set the station's clock right (NTP) and start again",
			ErrClockBehind, now.UTC().Format(time.RFC3339), db.Path(), latest.UTC().Format(time.RFC3339))
	}
	c, err := db.LastCheck(ctx, st.Name, st.Fixture)
	if errors.Is(err, store.ErrNotFound) {
		return fmt.Errorf("%w: station %s fixture %s has no reference check in the shift log", ErrNotReady, st.Name, st.Fixture)
	}
	if err != nil {
		return err
	}
	at := c.Time.Local().Format("2006-01-02 15:04")
	switch {
	case !c.OK:
		return fmt.Errorf("%w: the reference check of %s refused station %s fixture %s", ErrNotReady, at, st.Name, st.Fixture)
	case c.StationHash != st.Source.Hash:
		return fmt.Errorf("%w: the station file %s changed since the reference check of %s", ErrNotReady, st.Source.Name, at)
	}
	if h := st.Trust.CheckEveryHours; h > 0 && now.Sub(c.Time) > time.Duration(h*float64(time.Hour)) {
		return fmt.Errorf("%w: the reference check of %s is older than %g h", ErrNotReady, at, h)
	}
	if n := st.Trust.CheckEveryUnits; n > 0 && since != nil {
		since, err := since(ctx, db, st, c)
		if err != nil {
			return err
		}
		if since >= int64(n) {
			return fmt.Errorf("%w: %d units tested since the reference check of %s (a check is due every %d)", ErrNotReady, since, at, n)
		}
	}
	return nil
}

// sinceCheck is a session's running count of the runs tested since the
// station's last check: one query when the check changes, then one step per
// committed run (counting every run since the check before every unit made
// each unit slower as the shift went on). Runs another process adds to the
// same station and fixture meanwhile are not seen until the next check.
type sinceCheck struct {
	checkID int64
	known   bool
	n       int64
}

func (c *sinceCheck) count(ctx context.Context, db *store.DB, st *Station, chk store.StationCheck) (int64, error) {
	if !c.known || c.checkID != chk.ID {
		n, err := db.RunsSince(ctx, st.Name, st.Fixture, chk.LastRunID)
		if err != nil {
			return 0, err
		}
		c.checkID, c.known, c.n = chk.ID, true, n
	}
	return c.n, nil
}

func (c *sinceCheck) add(n int64) {
	if c.known {
		c.n += n
	}
}

// Uncertainty is the guard band U a station applies, and where it
// came from: the uncertainty stored in its shift log by 'padline station
// study', else the station file's uncertainty_pf, else the stand-in. Only
// "no shift log yet" and "no study in it" fall back; a log that cannot be
// opened or read is an error naming it. A shift log that does not exist
// yet is not created.
func Uncertainty(ctx context.Context, dbPath string, st *Station) (float64, string, error) {
	if _, err := os.Stat(dbPath); errors.Is(err, fs.ErrNotExist) {
		u, from := StatedUncertainty(st)
		return u, from, nil
	}
	db, err := store.OpenReadOnly(dbPath)
	if err != nil {
		return 0, "", fmt.Errorf("uncertainty of station %s: %w", st.Name, err)
	}
	defer db.Close()
	u, err := db.LastUncertainty(ctx, st.Name, st.Fixture)
	if errors.Is(err, store.ErrNotFound) {
		u, from := StatedUncertainty(st)
		return u, from, nil
	}
	if err != nil {
		return 0, "", fmt.Errorf("uncertainty of station %s in shift log %s: %w", st.Name, dbPath, err)
	}
	return u.UPF, fmt.Sprintf("shift log %s (station %s fixture %s, %s, %s)", dbPath, st.Name, st.Fixture,
		u.Time.Local().Format("2006-01-02 15:04"), u.Source), nil
}

// DriverLister lists the station drivers a log's runs were recorded with:
// a shift log (*store.DB) or the plant store.
type DriverLister interface {
	Drivers(ctx context.Context) ([]string, error)
}

var _ DriverLister = (*store.DB)(nil)

// DriverFilter is the station driver a history or drift view keeps: a log
// that holds runs of a real (gpio) station and simulated runs shows the
// real ones only, unless includeSim; any other log shows everything ("").
func DriverFilter(ctx context.Context, db DriverLister, includeSim bool) (string, error) {
	if includeSim {
		return "", nil
	}
	ds, err := db.Drivers(ctx)
	if err != nil {
		return "", err
	}
	if slices.Contains(ds, string(DriverGPIO)) && slices.Contains(ds, string(DriverSim)) {
		return string(DriverGPIO), nil
	}
	return "", nil
}

// ErrRealLog refuses simulated runs into a shift log that holds runs of a
// real station.
var ErrRealLog = errors.New("shift log holds runs of a real station")

// CheckSimulatedInto refuses to add simulated runs to db when it holds runs
// from a GPIO station, unless allow: simulated units must never pass for
// real ones.
func CheckSimulatedInto(ctx context.Context, db *store.DB, path string, allow bool) error {
	if allow {
		return nil
	}
	ds, err := db.Drivers(ctx)
	if err != nil {
		return err
	}
	if slices.Contains(ds, string(DriverGPIO)) {
		return fmt.Errorf("%w: %s; simulated runs would mix with real units (give another --db, or --into-real-log to add them anyway)", ErrRealLog, path)
	}
	return nil
}

package plant

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"padline/sequences"
	"padline/store"
	"padline/store/drift"
)

// Profile is what a station tells the plant about itself with every batch
// (from its station file), for the line board.
type Profile struct {
	Fixture string `json:"fixture"`
	// CheckEveryUnits and CheckEveryHours: a new shift-start check is due
	// after that many units or hours (0: no such limit).
	CheckEveryUnits int     `json:"check_every_units"`
	CheckEveryHours float64 `json:"check_every_hours"`
	// RatedOperations is the ladder relays' rated life and WarnFraction the
	// share of it at which a rung is flagged.
	RatedOperations float64 `json:"rated_operations"`
	WarnFraction    float64 `json:"relay_warn_fraction"`
}

// BoardStation is one station on the line board.
type BoardStation struct {
	Name string `json:"station"`
	Line string `json:"line"`
	// LastUnit is the station's latest run (nil: none yet).
	LastUnit *BoardUnit `json:"last_unit"`
	// ShiftRuns and ShiftPass count unit verdicts (pass and fail) since
	// the shift began. ShiftFirst counts the serials whose first unit
	// verdict on this station fell in the shift and ShiftFirstPass those
	// of them that passed it, as the station's own screen counts its
	// first-pass yield (a unit retested here after a fail elsewhere is a
	// first test here: DEVELOPERS.md "Plant-wide first-pass yield"). Yield
	// is the first-pass yield ShiftFirstPass/ShiftFirst (nil with no first
	// test).
	ShiftRuns      int64    `json:"shift_units"`
	ShiftPass      int64    `json:"shift_pass"`
	ShiftFirst     int64    `json:"shift_first_tests"`
	ShiftFirstPass int64    `json:"shift_first_pass"`
	Yield          *float64 `json:"shift_yield"`
	// LastCheck is the latest shift-start check; CheckDue says why a new
	// one is needed ("" when none is).
	LastCheck *BoardCheck `json:"last_check"`
	CheckDue  string      `json:"check_due"`
	// Relays is the latest relay count per rung; WornRungs counts rungs at
	// or past the station's warning fraction of rated life.
	Relays    []BoardRelay `json:"relays"`
	WornRungs int          `json:"worn_rungs"`
	MaxWear   float64      `json:"max_wear_fraction"`
	// Alarms counts open drift alarms: default-watch alarms (3σ
	// individuals + CUSUM) among the last BoardAlarmWindow passing units
	// of the last unit's variant on this station, with limits from the
	// first BoardBaseline of the last BoardSeries.
	Alarms int `json:"open_drift_alarms"`
	// Backlog is the forwarding backlog the station last reported and
	// Reported when (server clock); ClockOffset its measured clock error.
	Backlog     int64         `json:"backlog"`
	Reported    *time.Time    `json:"reported"`
	ClockOffset time.Duration `json:"clock_offset_ns"`
}

// BoardUnit is a station's last unit.
type BoardUnit struct {
	Serial   string            `json:"serial"`
	Variant  string            `json:"variant"`
	Verdict  sequences.Verdict `json:"verdict"`
	FailCode string            `json:"fail_code"`
	TripPF   *float64          `json:"trip_pf"`
	At       time.Time         `json:"at"`
}

// BoardCheck is a station's last shift-start check.
type BoardCheck struct {
	OK         bool      `json:"ok"`
	At         time.Time `json:"at"`
	UnitsSince int64     `json:"units_since"`
}

// BoardRelay is one rung's wear.
type BoardRelay struct {
	Fixture  string  `json:"fixture"`
	Rung     int     `json:"rung"`
	Count    int64   `json:"operations"`
	Fraction float64 `json:"fraction_of_rated"`
}

// Drift window of the line board (see BoardStation.Alarms).
const (
	BoardSeries      = 500
	BoardBaseline    = 50
	BoardAlarmWindow = 50
)

// Board returns every station of line ("": the whole plant), by name, as
// of now, with this shift begun at shiftStart.
func (db *DB) Board(ctx context.Context, line string, shiftStart time.Time, now time.Time) ([]BoardStation, error) {
	rows, err := db.pool.Query(ctx, `
		SELECT s.id, s.name, s.line, coalesce(l.backlog, 0), l.reported, coalesce(l.clock_offset_ns, 0), coalesce(l.profile, '{}')
		FROM stations s
		LEFT JOIN LATERAL (SELECT * FROM logs WHERE station_id = s.id ORDER BY reported DESC LIMIT 1) l ON true
		WHERE $1 = '' OR s.line = $1 ORDER BY s.name`, line)
	if err != nil {
		return nil, fmt.Errorf("line board: %w", err)
	}
	type st struct {
		id      int32
		b       BoardStation
		profile Profile
	}
	var all []st
	var (
		id       int32
		b        BoardStation
		reported *int64
		offset   int64
		prof     []byte
	)
	_, err = pgx.ForEachRow(rows, []any{&id, &b.Name, &b.Line, &b.Backlog, &reported, &offset, &prof}, func() error {
		x := st{id: id, b: b}
		if reported != nil && *reported > 0 {
			t := time.Unix(0, *reported).UTC()
			x.b.Reported = &t
		}
		x.b.ClockOffset = time.Duration(offset)
		_ = json.Unmarshal(prof, &x.profile)
		all = append(all, x)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("line board: %w", err)
	}
	out := make([]BoardStation, 0, len(all))
	for _, x := range all {
		if err := db.boardStation(ctx, x.id, &x.b, x.profile, shiftStart, now); err != nil {
			return nil, fmt.Errorf("line board: station %s: %w", x.b.Name, err)
		}
		out = append(out, x.b)
	}
	return out, nil
}

func (db *DB) boardStation(ctx context.Context, id int32, b *BoardStation, p Profile, shiftStart, now time.Time) error {
	var (
		u       BoardUnit
		verdict string
		at      int64
		varID   int32
	)
	err := db.pool.QueryRow(ctx, `SELECT r.serial, v.name, r.variant_id, r.verdict, r.fail_code, r.trip_pf, r.at
		FROM runs r JOIN variants v ON v.id = r.variant_id WHERE r.station_id = $1 ORDER BY r.at DESC LIMIT 1`, id).
		Scan(&u.Serial, &u.Variant, &varID, &verdict, &u.FailCode, &u.TripPF, &at)
	switch {
	case errors.Is(err, pgx.ErrNoRows):
	case err != nil:
		return err
	default:
		u.Verdict, u.At = sequences.Verdict(verdict), time.Unix(0, at).UTC()
		b.LastUnit = &u
	}
	if err := db.pool.QueryRow(ctx, `SELECT count(*) FILTER (WHERE verdict IN ('pass', 'fail')), count(*) FILTER (WHERE verdict = 'pass')
		FROM runs WHERE station_id = $1 AND at >= $2 AND at < $3`, id, shiftStart.UnixNano(), now.UnixNano()).Scan(&b.ShiftRuns, &b.ShiftPass); err != nil {
		return err
	}
	if err := db.pool.QueryRow(ctx, `SELECT count(*), count(*) FILTER (WHERE verdict = 'pass')
		FROM serial_station_first WHERE station_id = $1 AND at >= $2 AND at < $3`, id, shiftStart.UnixNano(), now.UnixNano()).
		Scan(&b.ShiftFirst, &b.ShiftFirstPass); err != nil {
		return err
	}
	if b.ShiftFirst > 0 {
		y := float64(b.ShiftFirstPass) / float64(b.ShiftFirst)
		b.Yield = &y
	}
	var (
		ok      bool
		ct      int64
		lastRun int64
		logID   int32
	)
	err = db.pool.QueryRow(ctx, `SELECT ok, time, last_run_id, log_id FROM station_checks WHERE station_id = $1
		ORDER BY time DESC LIMIT 1`, id).Scan(&ok, &ct, &lastRun, &logID)
	switch {
	case errors.Is(err, pgx.ErrNoRows):
		b.CheckDue = "no shift-start check on record"
	case err != nil:
		return err
	default:
		c := &BoardCheck{OK: ok, At: time.Unix(0, ct).UTC()}
		if err := db.pool.QueryRow(ctx, `SELECT count(*) FROM runs WHERE log_id = $1 AND local_id > $2`, logID, lastRun).Scan(&c.UnitsSince); err != nil {
			return err
		}
		b.LastCheck = c
		switch {
		case !ok:
			b.CheckDue = "last check refused the station"
		case p.CheckEveryHours > 0 && now.Sub(c.At) > time.Duration(p.CheckEveryHours*float64(time.Hour)):
			b.CheckDue = fmt.Sprintf("last check older than %g h", p.CheckEveryHours)
		case p.CheckEveryUnits > 0 && c.UnitsSince >= int64(p.CheckEveryUnits):
			b.CheckDue = fmt.Sprintf("%d units since the last check (limit %d)", c.UnitsSince, p.CheckEveryUnits)
		}
	}
	rows, err := db.pool.Query(ctx, `SELECT f.name, w.rung, w.count FROM relay_wear w JOIN fixtures f ON f.id = w.fixture_id
		WHERE w.station_id = $1 ORDER BY f.name, w.rung`, id)
	if err != nil {
		return err
	}
	var r BoardRelay
	var rung int32
	if _, err := pgx.ForEachRow(rows, []any{&r.Fixture, &rung, &r.Count}, func() error {
		r.Rung = int(rung)
		if p.RatedOperations > 0 {
			r.Fraction = float64(r.Count) / p.RatedOperations
			b.MaxWear = max(b.MaxWear, r.Fraction)
			if p.WarnFraction > 0 && r.Fraction >= p.WarnFraction {
				b.WornRungs++
			}
		}
		b.Relays = append(b.Relays, r)
		return nil
	}); err != nil {
		return err
	}
	if b.LastUnit != nil {
		var name string
		if err := db.pool.QueryRow(ctx, `SELECT name FROM stations WHERE id = $1`, id).Scan(&name); err != nil {
			return err
		}
		pts, err := db.TripValues(ctx, store.Filter{Station: name, Variant: b.LastUnit.Variant, Verdict: sequences.Pass}, BoardSeries)
		if err != nil {
			return err
		}
		if len(pts) > BoardBaseline+1 {
			x := make([]float64, len(pts))
			for i, p := range pts {
				x[i] = p.TripPF
			}
			w, err := drift.WatchSeries(x, drift.FirstN(BoardBaseline), drift.Options{}, drift.DefaultSet)
			if err == nil {
				for _, a := range w.Alarms {
					if a.Unit >= len(x)-BoardAlarmWindow {
						b.Alarms++
					}
				}
			}
		}
	}
	return nil
}

// RunTimes are the three times the plant keeps for a run.
type RunTimes struct {
	// Finished is the station's clock, Received the server's when the run
	// arrived, At the finish corrected by the station's clock offset.
	Finished, Received, At time.Time
}

// RunTimes returns the times kept for the run with id localID in station's
// latest shift log.
func (db *DB) RunTimes(ctx context.Context, station string, localID int64) (RunTimes, error) {
	var f, r, a int64
	err := db.pool.QueryRow(ctx, `SELECT r.finished, r.received, r.at FROM runs r JOIN stations s ON s.id = r.station_id
		WHERE s.name = $1 AND r.local_id = $2 ORDER BY r.received DESC LIMIT 1`, station, localID).Scan(&f, &r, &a)
	if errors.Is(err, pgx.ErrNoRows) {
		return RunTimes{}, fmt.Errorf("run %d of %s: %w", localID, station, ErrNotFound)
	}
	if err != nil {
		return RunTimes{}, fmt.Errorf("run %d of %s: %w", localID, station, err)
	}
	return RunTimes{time.Unix(0, f).UTC(), time.Unix(0, r).UTC(), time.Unix(0, a).UTC()}, nil
}

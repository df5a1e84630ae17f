package session

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"time"

	"padline/store"
)

// StationBadges are the station file's badge prefixes (section badges:
// lot_prefix, operator_prefix): a scan that starts with one is a lot or
// operator badge, not a unit's serial. Empty: no such badge.
type StationBadges struct {
	LotPrefix      string
	OperatorPrefix string
}

// BadgeKind says what a badge sets.
type BadgeKind string

// The badges a station knows.
const (
	BadgeLot      BadgeKind = "lot"
	BadgeOperator BadgeKind = "operator"
)

// readStationBadges reads the optional badges section.
func readStationBadges(d *doc) StationBadges {
	var b StationBadges
	if !d.section("badges", false) {
		return b
	}
	b.LotPrefix = d.str("badges.lot_prefix", false)
	b.OperatorPrefix = d.str("badges.operator_prefix", false)
	for _, k := range []struct{ key, p string }{{"badges.lot_prefix", b.LotPrefix}, {"badges.operator_prefix", b.OperatorPrefix}} {
		if k.p == "" {
			continue
		}
		if strings.TrimSpace(k.p) != k.p || strings.ContainsFunc(k.p, func(r rune) bool { return r < 0x21 || r > 0x7e }) {
			d.fail(k.key, "want printable ASCII without spaces (a barcode prefix), got %q", k.p)
		}
	}
	if b.LotPrefix != "" && b.OperatorPrefix != "" &&
		(strings.HasPrefix(b.LotPrefix, b.OperatorPrefix) || strings.HasPrefix(b.OperatorPrefix, b.LotPrefix)) {
		d.fail("badges.operator_prefix", "%q and lot_prefix %q overlap: a badge could be read as either", b.OperatorPrefix, b.LotPrefix)
	}
	return b
}

// Badge reads raw (as scanned) as a badge: its kind and the value after
// the prefix. ok is false when raw is not a badge (a serial). A badge with
// nothing after its prefix is an error.
func (b StationBadges) Badge(raw string) (kind BadgeKind, value string, ok bool, err error) {
	s := strings.Trim(raw, " \t\r\n")
	for _, c := range []struct {
		kind   BadgeKind
		prefix string
	}{{BadgeLot, b.LotPrefix}, {BadgeOperator, b.OperatorPrefix}} {
		if c.prefix == "" || !strings.HasPrefix(s, c.prefix) {
			continue
		}
		v := strings.TrimSpace(strings.TrimPrefix(s, c.prefix))
		if v == "" || len(v) > maxSerialBytes || strings.ContainsFunc(v, func(r rune) bool { return r < 0x20 || r > 0x7e }) {
			return c.kind, "", true, fmt.Errorf("%s badge %s: want 1 to %d printable ASCII characters after %q", c.kind, quoteSerial(s), maxSerialBytes, c.prefix)
		}
		return c.kind, v, true, nil
	}
	return "", "", false, nil
}

// badge takes a lot or operator badge scanned at the station: every
// following run records the new value. It runs on Run's goroutine, so the
// run template is never changed under a unit in test.
func (s *Session) badge(kind BadgeKind, value string) {
	switch kind {
	case BadgeLot:
		s.seq.Template.Lot, s.opts.Lot = value, value
	case BadgeOperator:
		s.seq.Template.Operator, s.opts.Operator = value, value
	}
	s.emit(Event{Kind: KindBadgeScanned, Badge: &Badge{Kind: kind, Value: value}})
}

// CheckSchedule is when the next shift-start check falls due.
type CheckSchedule struct {
	// UnitsLeft is how many production units may still be tested before
	// the check is due; -1 when the station sets no unit limit.
	UnitsLeft int64
	// Due is when the check falls due by time; zero when the station sets
	// no time limit.
	Due time.Time
	// Checked is when the last check ran; zero when there is none.
	Checked time.Time
}

// NextCheck is the gate's schedule (see Ready): units and time left until
// the station must be checked again. Without a passing check of this
// station file both are used up (UnitsLeft 0, Due the zero time when the
// station sets no time limit, else now).
func NextCheck(ctx context.Context, db *store.DB, st *Station, now time.Time) (CheckSchedule, error) {
	sc := CheckSchedule{UnitsLeft: -1}
	c, err := db.LastCheck(ctx, st.Name, st.Fixture)
	if err != nil && !errors.Is(err, store.ErrNotFound) {
		return sc, err
	}
	valid := err == nil && c.OK && c.StationHash == st.Source.Hash
	if err == nil {
		sc.Checked = c.Time
	}
	if n := st.Trust.CheckEveryUnits; n > 0 {
		sc.UnitsLeft = 0
		if valid {
			since, err := db.RunsSince(ctx, st.Name, st.Fixture, c.LastRunID)
			if err != nil {
				return sc, err
			}
			sc.UnitsLeft = max(0, int64(n)-since)
		}
	}
	if h := st.Trust.CheckEveryHours; h > 0 {
		sc.Due = now
		if valid {
			sc.Due = c.Time.Add(time.Duration(h * float64(time.Hour)))
		}
	}
	return sc, nil
}

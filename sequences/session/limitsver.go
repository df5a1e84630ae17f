package session

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"

	"padline/sequences/timing"
	"padline/store"
)

// Limits as versions with approval (README "Approving limits"): every
// change of what a run judges against — the variant file, the station's U
// from a study, the guard band — is a new limits version of the station,
// fixture and variant in the shift log, pending until someone approves it.
// Runs judge against an approved version only; the gate refuses while the
// current limits are pending or were rejected.

// ErrLimitsPending is wrapped (with ErrNotReady) by the gate's refusal
// while the current limits await approval or were rejected.
var ErrLimitsPending = errors.New("limits not approved")

// sameEps is how close two versions' U and limits must be to count as one
// (the limits are computed with a fixed seed, so equal inputs give equal
// numbers; the tolerance only absorbs float formatting).
const sameEps = 1e-9

// limitsNow is the version the current inputs give.
func limitsNow(v *Variant, st *Station, u float64, from string, tl timing.Limits) store.LimitsVersion {
	return store.LimitsVersion{Station: st.Name, Fixture: st.Fixture, Variant: v.Name, VariantHash: v.Source.Hash,
		UPF: u, USource: from, LowPF: tl.Low, HighPF: tl.High}
}

// SyncLimits records the rig's current limits as a new version of its
// station, fixture and variant when they differ from the newest one, and
// returns the version that now applies. The first version in a shift log
// is approved on first use (there is nothing to compare it with); a later
// one is pending, unless only U changed and by no more than the station
// file's auto_approve_u_pf.
func SyncLimits(ctx context.Context, db *store.DB, r *Rig, now time.Time) (store.LimitsVersion, error) {
	return syncLimits(ctx, db, limitsNow(r.Variant, r.Station, r.UncertaintyPF, r.UncertaintyFrom, r.Limits.TestLimits), r.Station, now)
}

func syncLimits(ctx context.Context, db *store.DB, cur store.LimitsVersion, st *Station, now time.Time) (store.LimitsVersion, error) {
	ctx = context.WithoutCancel(ctx)
	prev, err := db.LatestLimitsVersion(ctx, cur.Station, cur.Fixture, cur.Variant)
	cur.Created = now.UTC()
	switch {
	case errors.Is(err, store.ErrNotFound):
		cur.Cause = "first use of variant " + cur.Variant + " on this station and fixture"
		cur.Status, cur.ApprovedBy, cur.Decided = store.LimitsApproved, "padline (first use)", cur.Created
		cur.Reason = "no earlier version in this shift log to compare with"
	case err != nil:
		return cur, err
	case prev.VariantHash == cur.VariantHash && math.Abs(prev.UPF-cur.UPF) < sameEps &&
		math.Abs(prev.LowPF-cur.LowPF) < sameEps && math.Abs(prev.HighPF-cur.HighPF) < sameEps:
		return prev, nil
	default:
		cur.Cause, cur.Status = limitsCause(prev, cur), store.LimitsPending
		if b := st.AutoApproveUPF; b > 0 && prev.VariantHash == cur.VariantHash && math.Abs(prev.UPF-cur.UPF) <= b {
			cur.Status, cur.ApprovedBy, cur.Decided = store.LimitsApproved, "padline (auto)", cur.Created
			cur.Reason = fmt.Sprintf("U moved %.3f pF, within the station file's auto_approve_u_pf %g pF", math.Abs(prev.UPF-cur.UPF), b)
		}
	}
	if cur.ID, err = db.AddLimitsVersion(ctx, cur); err != nil {
		return cur, err
	}
	return cur, nil
}

// limitsCause says what changed from a to b.
func limitsCause(a, b store.LimitsVersion) string {
	var why []string
	if a.VariantHash != b.VariantHash {
		why = append(why, fmt.Sprintf("variant file %s changed (sha256 %.12s → %.12s)", b.Variant, a.VariantHash, b.VariantHash))
	}
	if math.Abs(a.UPF-b.UPF) >= sameEps {
		why = append(why, fmt.Sprintf("guard band U %.3f → %.3f pF (%s)", a.UPF, b.UPF, uKind(b.USource)))
	}
	if len(why) == 0 {
		why = append(why, "the limits were recomputed (another padline version's model)")
	}
	return strings.Join(why, "; ")
}

// uKind says in a few words where U came from (the version keeps the
// whole source).
func uKind(source string) string {
	switch {
	case strings.HasPrefix(source, "shift log"):
		return "the station's study in the shift log"
	case strings.HasPrefix(source, "station file"):
		return "the station file's uncertainty_pf"
	}
	return "the stand-in"
}

// SyncStudyLimits records the limits a new U gives (after a study stored
// it) as a version, as SyncLimits does for the rig's own U.
func SyncStudyLimits(ctx context.Context, db *store.DB, r *Rig, u float64, from string, now time.Time) (store.LimitsVersion, error) {
	rep, err := r.Variant.StationLimits(u)
	if err != nil {
		return store.LimitsVersion{}, err
	}
	return syncLimits(ctx, db, limitsNow(r.Variant, r.Station, u, from, rep.TestLimits), r.Station, now)
}

// CurrentLimits records the limits that variantRef's file and the
// station's U (Uncertainty) give now, without opening a pin, and returns
// the version that applies.
func CurrentLimits(ctx context.Context, db *store.DB, variantRef string, st *Station, now time.Time) (store.LimitsVersion, error) {
	v, err := LoadVariant(variantRef)
	if err != nil {
		return store.LimitsVersion{}, err
	}
	u, from, err := Uncertainty(ctx, db.Path(), st)
	if err != nil {
		return store.LimitsVersion{}, err
	}
	rep, err := v.StationLimits(u)
	if err != nil {
		return store.LimitsVersion{}, err
	}
	return syncLimits(ctx, db, limitsNow(v, st, u, from, rep.TestLimits), st, now)
}

// limitsRefusal is the gate's refusal for version lv (nil when approved).
func limitsRefusal(lv store.LimitsVersion) error {
	switch lv.Status {
	case store.LimitsApproved:
		return nil
	case store.LimitsRejected:
		return fmt.Errorf("%w: %w: limits version %d of %s (%.2f … %.2f pF; %s) was rejected by %s: %s",
			ErrNotReady, ErrLimitsPending, lv.ID, lv.Variant, lv.LowPF, lv.HighPF, lv.Cause, lv.ApprovedBy, lv.Reason)
	}
	return fmt.Errorf("%w: %w: limits version %d of %s (%.2f … %.2f pF) awaits approval: %s",
		ErrNotReady, ErrLimitsPending, lv.ID, lv.Variant, lv.LowPF, lv.HighPF, lv.Cause)
}

// approveHint is the command that approves version id.
func approveHint(id int64, shiftLog string) string {
	return fmt.Sprintf("run 'padline limits approve %d --db %s --by NAME --why TEXT' (or 'padline limits reject')", id, shiftLog)
}

// DecideLimits approves (approve true) or rejects limits version id in db.
func DecideLimits(ctx context.Context, db *store.DB, id int64, approve bool, by, why string, now time.Time) (store.LimitsVersion, error) {
	if strings.TrimSpace(by) == "" || strings.TrimSpace(why) == "" {
		return store.LimitsVersion{}, errors.New("limits: --by (who decides) and --why (the reason) are both required")
	}
	status := store.LimitsRejected
	if approve {
		status = store.LimitsApproved
	}
	if err := db.DecideLimitsVersion(ctx, id, status, by, why, now.UTC()); err != nil {
		return store.LimitsVersion{}, err
	}
	return db.LimitsVersionByID(ctx, id)
}

// WriteLimitsVersions prints versions one per line, oldest first.
func WriteLimitsVersions(w io.Writer, vs []store.LimitsVersion) {
	if len(vs) == 0 {
		fmt.Fprintln(w, "no limits versions")
		return
	}
	const row = "%-4s %-9s %-16s %-10s %-8s %-7s %-16s %7s %-17s %s\n"
	fmt.Fprintf(w, row, "ID", "STATUS", "CREATED", "VARIANT", "STATION", "FIXTURE", "LIMITS pF", "U pF", "BY", "CAUSE / REASON")
	for _, v := range vs {
		why := v.Cause
		if v.Reason != "" {
			why += " / " + v.Reason
		}
		fmt.Fprintf(w, row, fmt.Sprint(v.ID), v.Status, v.Created.Local().Format("2006-01-02 15:04"), v.Variant, v.Station, v.Fixture,
			fmt.Sprintf("%.2f … %.2f", v.LowPF, v.HighPF), fmt.Sprintf("%.3f", v.UPF), v.ApprovedBy, why)
	}
}

// WriteLimitsDiff prints what differs between versions a and b.
func WriteLimitsDiff(w io.Writer, a, b store.LimitsVersion) {
	p := func(format string, args ...any) { fmt.Fprintf(w, format+"\n", args...) }
	if a.ID == 0 || b.ID == 0 {
		p("limits of %s → %s as this station would compute them now (not versions)", a.Variant, b.Variant)
	} else {
		p("limits version %d → %d", a.ID, b.ID)
	}
	diff := func(what, x, y string) {
		mark := " "
		if x != y {
			mark = "*"
		}
		p("%s %-13s %-40s %s", mark, what, x, y)
	}
	diff("variant", a.Variant, b.Variant)
	diff("station", a.Station+" / "+a.Fixture, b.Station+" / "+b.Fixture)
	diff("variant file", fmt.Sprintf("sha256 %.12s", a.VariantHash), fmt.Sprintf("sha256 %.12s", b.VariantHash))
	diff("guard band U", fmt.Sprintf("%.3f pF", a.UPF), fmt.Sprintf("%.3f pF", b.UPF))
	diff("U from", a.USource, b.USource)
	diff("low limit", fmt.Sprintf("%.2f pF", a.LowPF), fmt.Sprintf("%.2f pF", b.LowPF))
	diff("high limit", fmt.Sprintf("%.2f pF", a.HighPF), fmt.Sprintf("%.2f pF", b.HighPF))
	diff("status", a.Status+" "+a.ApprovedBy, b.Status+" "+b.ApprovedBy)
	p("  low %+.3f pF, high %+.3f pF, window %+.3f pF", b.LowPF-a.LowPF, b.HighPF-a.HighPF, (b.HighPF-b.LowPF)-(a.HighPF-a.LowPF))
}

// limitsPoll is how often a waiting session looks whether its limits were
// approved (by 'padline limits approve' in another process).
const limitsPoll = 2 * time.Second

// limitsGate refuses while the session's limits version is not approved:
// it reads the version again (another process approves it), emits
// KindStationRefused once, and with WaitForCheck waits for the approval
// instead of returning the refusal.
func (s *Session) limitsGate(ctx context.Context) error {
	announced := false
	for s.limits.Status != store.LimitsApproved {
		lv, err := s.db.LimitsVersionByID(context.WithoutCancel(ctx), s.limits.ID)
		if err != nil {
			return err
		}
		s.limits = lv
		err = limitsRefusal(lv)
		if err == nil {
			break
		}
		fix := approveHint(lv.ID, s.opts.ShiftLog)
		if lv.Status == store.LimitsRejected {
			fix = "make a new limits version (restore the variant file or U) and approve it"
		}
		if !announced {
			why := strings.TrimPrefix(err.Error(), ErrNotReady.Error()+": ")
			s.emit(Event{Kind: KindStationRefused, Refused: &Refusal{Why: why, Fix: fix, Err: err}})
			announced = true
		}
		if !s.opts.WaitForCheck || lv.Status == store.LimitsRejected {
			return fmt.Errorf("%w: %s", err, fix)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(limitsPoll):
		}
	}
	return nil
}

// LimitsRequest is one of 'padline limits pending|approve|reject|diff'.
type LimitsRequest struct {
	// Action is "pending", "approve", "reject" or "diff".
	Action string
	// ShiftLog is the shift log's path; Station (a station file or
	// built-in, may be empty) narrows pending to its station and fixture.
	ShiftLog, Station string
	// Variant (pending): first record the limits its file and the
	// station's U give now.
	Variant string
	// Args are the version id to decide, or the two versions to diff.
	Args    []string
	By, Why string
}

// LimitsResult is what a limits command prints.
type LimitsResult struct {
	Action   string                `json:"action"`
	Versions []store.LimitsVersion `json:"versions"`
}

// Write prints the result: the versions, or the difference of two.
func (r LimitsResult) Write(w io.Writer) {
	if r.Action == "diff" && len(r.Versions) == 2 {
		WriteLimitsDiff(w, r.Versions[0], r.Versions[1])
		return
	}
	WriteLimitsVersions(w, r.Versions)
}

// DoLimits carries out req on its shift log (created when missing, as the
// station's first command creates it).
func DoLimits(ctx context.Context, req LimitsRequest, now time.Time) (LimitsResult, error) {
	res := LimitsResult{Action: req.Action, Versions: []store.LimitsVersion{}}
	want := map[string]int{"pending": 0, "approve": 1, "reject": 1, "diff": 2}[req.Action]
	if len(req.Args) != want {
		return res, fmt.Errorf("limits %s: want %d version id(s), got %d", req.Action, want, len(req.Args))
	}
	ids := make([]int64, len(req.Args))
	byVariant := false // diff of two variants' current limits
	for i, a := range req.Args {
		var err error
		if ids[i], err = strconv.ParseInt(a, 10, 64); err != nil {
			if req.Action == "diff" {
				byVariant = true
				continue
			}
			return res, fmt.Errorf("limits %s: %q is not a limits version id (a number 'limits pending' or 'history --limits-history' lists)", req.Action, a)
		}
	}
	var st *Station
	if req.Station != "" {
		var err error
		if st, err = LoadStation(req.Station); err != nil {
			return res, err
		}
	}
	db, err := store.Open(req.ShiftLog)
	if err != nil {
		return res, err
	}
	defer db.Close()
	switch req.Action {
	case "pending":
		if req.Variant != "" {
			if st == nil {
				return res, errors.New("limits pending: --variant needs --station (whose U the limits use)")
			}
			if _, err := CurrentLimits(ctx, db, req.Variant, st, now); err != nil {
				return res, err
			}
		}
		var name, fixture string
		if st != nil {
			name, fixture = st.Name, st.Fixture
		}
		res.Versions, err = db.LimitsVersions(ctx, name, fixture, "", store.LimitsPending)
	case "approve", "reject":
		var lv store.LimitsVersion
		lv, err = DecideLimits(ctx, db, ids[0], req.Action == "approve", req.By, req.Why, now)
		res.Versions = []store.LimitsVersion{lv}
	case "diff":
		if byVariant {
			return diffVariants(ctx, db, req.Args, st, res)
		}
		for _, id := range ids {
			lv, err := db.LimitsVersionByID(ctx, id)
			if err != nil {
				return res, err
			}
			res.Versions = append(res.Versions, lv)
		}
	default:
		err = fmt.Errorf("limits: unknown action %q", req.Action)
	}
	return res, err
}

// Writer is a report that prints itself for people.
type Writer interface{ Write(w io.Writer) }

// Emit prints r as indented JSON (asJSON) or for people: what every
// command's --json means.
func Emit(w io.Writer, asJSON bool, r Writer) error {
	if !asJSON {
		r.Write(w)
		return nil
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(r)
}

// Write prints the validation (WriteValidate).
func (r ValidateReport) Write(w io.Writer) { WriteValidate(w, r) }

// Write prints the registration (WriteRegister).
func (r RegisterReport) Write(w io.Writer) { WriteRegister(w, r) }

// diffVariants computes the limits two variant files (or built-ins) give
// with the station's U (the stand-in without --station), recording nothing.
func diffVariants(ctx context.Context, db *store.DB, refs []string, st *Station, res LimitsResult) (LimitsResult, error) {
	u, from := DefaultUncertaintyPF, "stand-in (no --station)"
	if st != nil {
		var err error
		if u, from, err = Uncertainty(ctx, db.Path(), st); err != nil {
			return res, err
		}
	} else {
		st = &Station{}
	}
	for _, ref := range refs {
		v, err := LoadVariant(ref)
		if err != nil {
			return res, err
		}
		rep, err := v.StationLimits(u)
		if err != nil {
			return res, err
		}
		res.Versions = append(res.Versions, limitsNow(v, st, u, from, rep.TestLimits))
	}
	return res, nil
}

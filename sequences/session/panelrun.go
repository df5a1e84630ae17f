package session

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"time"

	"padline/sequences"
	"padline/store"
)

// IsPanelStation reports whether the station file ref describes a panel
// (a `sites:` section). A file that does not load is not a panel: the
// single-unit path then reports its error.
func IsPanelStation(ref string) bool {
	st, err := LoadStation(ref)
	return err == nil && st.Sites != nil
}

// PanelBench is a panel station opened with its shift log: the rig, the
// log and the variant's configuration hash, the relay counts loaded.
type PanelBench struct {
	*PanelRig
	DB   *store.DB
	Hash string
}

// OpenPanelBench loads variant and panel station, takes the station's U
// from the shift log at dbPath, builds the panel rig, opens the log and
// loads the relay counts. Close it on every path.
func OpenPanelBench(ctx context.Context, variant, station, dbPath string, o RigOptions) (*PanelBench, error) {
	v, st, err := Load(variant, station)
	if err != nil {
		return nil, err
	}
	if o.UncertaintyPF, o.UncertaintyFrom, err = Uncertainty(ctx, dbPath, st); err != nil {
		return nil, err
	}
	r, err := NewPanelRig(v, st, o)
	if err != nil {
		return nil, err
	}
	db, err := store.Open(dbPath)
	if err != nil {
		return nil, errors.Join(err, r.Halt())
	}
	b := &PanelBench{PanelRig: r, DB: db}
	b.Hash, err = db.PutVariant(ctx, v.Name, v.Source.Raw)
	if err == nil {
		err = r.LoadRelayWear(ctx, db)
	}
	if err != nil {
		return nil, errors.Join(err, r.Halt(), db.Close())
	}
	return b, nil
}

// Close halts the panel, saves the relay counts and closes the log.
func (b *PanelBench) Close(ctx context.Context) error {
	return errors.Join(b.Halt(), b.SaveRelayWear(ctx, b.DB), b.DB.Close())
}

// PanelView shows a panel run ('padline run' on a panel station); the
// terminal's is console.Panel. Methods returning an error stop the run
// with it (a broken output).
type PanelView interface {
	// Started: the rig is open and the gate let it test.
	Started(r *PanelRig, shiftLog string)
	// Locked: the gate refused the station; fix clears it.
	Locked(why error, fix string)
	// Refused: a scanned line was not a panel this station can test.
	Refused(line string, why error) error
	// Prompt tells the operator what to do with the fixture.
	Prompt(msg string)
	// Tested: a panel's runs are committed; stationErr is a panel-wide
	// station fault (committed on every tested site).
	Tested(oc *PanelOutcome, lim sequences.Limits, stationErr error) error
	// Aborted: a stop came mid-panel; nothing of it was logged.
	Aborted(label string)
	// Ended: the input ended or the run was stopped.
	Ended(tested int)
}

// RunPanel is the production loop of a panel station: each scanned line
// is one panel ("LABEL [x:SITES]", or with sites.serials: scan every
// site's label), tested in one closure with one run per site committed to
// the shift log and forwarded to the plant store (Options.PlantURL) as a
// single unit's are. The gate refuses as for one unit (an error wrapping
// ErrNotReady). Options' Variant, Station, ShiftLog, Operator, Lot,
// Strategy, Software, PanelGPIO, LidTimeout, PlantURL and Warn are used.
func RunPanel(ctx context.Context, o Options, sc Scanner, view PanelView) (err error) {
	b, err := OpenPanelBench(ctx, o.Variant, o.Station, o.ShiftLog, RigOptions{Strategy: o.Strategy, PanelGPIO: o.PanelGPIO})
	if err != nil {
		return err
	}
	defer func() { err = errors.Join(err, b.Close(ctx)) }()
	// Plant forwarding: a goroutine of its own, handed every site's
	// committed run; stopped (its last batch sent) before the log closes.
	fw := forwardLog(ctx, b.DB, b.Station, o.PlantURL, o.Warn)
	defer fw.Stop()
	now := o.Now
	if now == nil {
		now = time.Now
	}
	if err := Ready(ctx, b.DB, b.Station, now()); err != nil {
		view.Locked(err, CheckHint(b.Variant.Name, b.Station, o.ShiftLog))
		return err
	}
	// Each site's fixture offset from the check that let the station test.
	if _, err := PanelOffsetsFromLog(ctx, b.DB, b.PanelRig); err != nil {
		return err
	}
	view.Started(b.PanelRig, o.ShiftLog)
	st := b.Station
	tmpl := sequences.Run{Variant: b.Variant.Name, ConfigHash: b.Hash, Station: st.Name, Fixture: st.Fixture,
		Operator: o.Operator, Lot: o.Lot, Software: o.Software, Driver: string(st.Driver)}
	tested := 0
	for ctx.Err() == nil {
		line, ok, serr := sc.Scan(ctx)
		if serr != nil && !errors.Is(serr, ErrLineTooLong) {
			return serr
		}
		if !ok {
			break
		}
		if line = strings.TrimSpace(line); line == "" {
			continue
		}
		label, serials, xout, perr := ParsePanelLine(b.PanelRig, line)
		if serr != nil {
			perr = serr
		}
		if perr != nil {
			if err := view.Refused(line, perr); err != nil {
				return err
			}
			continue
		}
		if b.Sim != nil {
			if _, err := b.Sim.Load(serials); err != nil {
				return err
			}
		} else if err := b.waitPanel(ctx, label, tested > 0, o.LidTimeout, view.Prompt); err != nil {
			if ctx.Err() != nil {
				return nil
			}
			return err
		}
		oc, terr := b.TestPanel(ctx, b.DB, tmpl, label, serials, xout, now)
		if oc != nil {
			for i, id := range oc.IDs {
				if id != 0 {
					fw.Committed(id, *oc.Runs[i])
				}
			}
		}
		if b.Sim != nil {
			b.Sim.Unload()
		}
		if errors.Is(terr, sequences.ErrAborted) {
			view.Aborted(label)
			return nil
		}
		if oc == nil || errors.Is(terr, sequences.ErrNotSaved) {
			return terr
		}
		tested++
		if err := view.Tested(oc, b.PlanConfig.Limits, terr); err != nil {
			return err
		}
	}
	view.Ended(tested)
	return nil
}

// waitPanel asks the operator to put the panel into the fixture: the lid
// must open after the panel before and close again.
func (r *PanelRig) waitPanel(ctx context.Context, label string, after bool, timeout time.Duration, prompt func(string)) error {
	fx := r.Panel.Site(0)
	if after {
		prompt("open the lid and take the panel out")
		if err := fx.WaitLid(ctx, false, lidPoll, timeout); err != nil {
			return err
		}
	}
	prompt(fmt.Sprintf("load panel %s and close the lid", label))
	return fx.WaitLid(ctx, true, lidPoll, timeout)
}

// ParsePanelLine reads one scanned panel: "LABEL [x:2,5]" with serials
// from the variant's panel_serial, or, with sites.serials: scan, one label
// per site where "-" marks an x-out.
func ParsePanelLine(r *PanelRig, line string) (label string, serials []string, xout []bool, err error) {
	f := strings.Fields(line)
	n := r.Sites()
	if r.Station.Sites.ScanEach {
		if len(f) != n {
			return "", nil, nil, fmt.Errorf("%q: want %d site labels (\"-\" for an x-out), got %d", line, n, len(f))
		}
		xout = make([]bool, n)
		first := -1
		for i, s := range f {
			xout[i] = s == "-"
			if !xout[i] && first < 0 {
				first = i
			}
		}
		label = "panel-" + f[max(first, 0)]
		serials, err = PanelSerials(r.Variant, n, label, f, xout)
		return label, serials, xout, err
	}
	if len(f) == 0 || len(f) > 2 {
		return "", nil, nil, fmt.Errorf("%q: want a panel label, optionally followed by x:SITES (x-outs, e.g. x:2,5)", line)
	}
	xs := ""
	if len(f) == 2 {
		var ok bool
		if xs, ok = strings.CutPrefix(f[1], "x:"); !ok {
			return "", nil, nil, fmt.Errorf("%q: want x:SITES after the label, got %q", line, f[1])
		}
	}
	if xout, err = ParseXOuts(xs, n); err != nil {
		return "", nil, nil, err
	}
	serials, err = PanelSerials(r.Variant, n, f[0], nil, xout)
	return f[0], serials, xout, err
}

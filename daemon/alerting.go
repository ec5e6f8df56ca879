package daemon

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/daemon/config"
	"github.com/curvewatch/curvewatch/jobs"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// alerter updates the alert states of a refit's model inside the refit's
// own transaction (jobs.Runner.OnRecord), and queues a delivery per
// receiver for each change the receivers hear of. Because it runs in that
// transaction, an alert state changes exactly when a refit is recorded:
// a retried, crashed or duplicate refit changes nothing twice.
type alerter struct {
	store     *history.Store
	models    map[string]*config.Model
	receivers []string
	// dashboard is the public base URL alerts link to.
	dashboard string
	// fdr is the false-discovery-rate level across the models of one
	// schedule (0: off), and family the number of models per schedule.
	fdr    float64
	family map[string]int
	now    func() time.Time
}

func newAlerter(cfg *config.Config, store *history.Store, receivers []string) *alerter {
	al := &alerter{store: store, models: map[string]*config.Model{}, receivers: receivers,
		dashboard: cfg.PublicURL, fdr: cfg.Alerting.FDR, family: map[string]int{}, now: time.Now}
	for i := range cfg.Models {
		m := &cfg.Models[i]
		al.models[m.Name] = m
		al.family[m.Schedule]++
	}
	return al
}

// onRecord is the jobs.Runner.OnRecord hook.
func (al *alerter) onRecord(ctx context.Context, tx pgx.Tx, res *jobs.Result) error {
	m, ok := al.models[res.Model]
	if !ok {
		return nil // a manual run of a model not in this config: nothing to judge it by
	}
	now := al.now()
	findings := []alerts.Finding{refitFinding(m.Name, res, m.Watch.FailingRuns)}
	if m.MaxAge > 0 {
		newest := res.Newest
		if newest.IsZero() {
			if w, ok, err := al.store.Watermark(ctx, m.Name); err != nil {
				return err
			} else if ok {
				newest = w
			}
		}
		findings = append(findings, staleFinding(m.Name, newest, now, m.MaxAge))
	}
	gated := al.fdr > 0 && !res.Slot.IsZero()
	if gated {
		// The family's lock comes before any alert row's lock, so that the
		// member that judges the family never waits for a member that
		// waits for the family.
		if err := al.store.LockSlotTx(ctx, tx, m.Schedule, res.Slot); err != nil {
			return err
		}
	}
	if rep := res.Report; rep != nil {
		findings = append(findings, otherFindings(m.Name, rep, res.ReferenceID, res.FitID)...)
		if !gated {
			findings = append(findings, shiftFindings(m.Name, rep, res.ReferenceID, res.FitID, true)...)
		}
	}
	if err := al.apply(ctx, tx, m, res.FitID, findings, res.Report != nil && !gated, now); err != nil {
		return err
	}
	if gated {
		return al.judgeFamily(ctx, tx, m, res, now)
	}
	return nil
}

// apply steps the model's alerts by the findings, saves them and queues
// the deliveries. With compared set, a shift alert of a term the new
// comparison no longer has (the term left the spec) resolves.
func (al *alerter) apply(ctx context.Context, tx pgx.Tx, m *config.Model, fitID int64, findings []alerts.Finding, compared bool, now time.Time) error {
	states, err := al.store.AlertStatesTx(ctx, tx, m.Name)
	if err != nil {
		return err
	}
	seen := map[alerts.Key]bool{}
	for _, f := range findings {
		seen[alerts.Key{Model: f.Model, Term: f.Term, Kind: f.Kind}] = true
	}
	if compared {
		for k, st := range states {
			open := st.State == alerts.StatePending || st.State == alerts.StateFiring
			shift := k.Kind == alerts.KindCurveShift || k.Kind == alerts.KindCoefficientShift
			if open && shift && !seen[k] {
				findings = append(findings, alerts.Finding{Model: k.Model, Term: k.Term, Kind: k.Kind,
					Summary: "the term is no longer in the model", Numbers: map[string]any{"fit": fitID}})
			}
		}
	}
	for _, f := range findings {
		k := alerts.Key{Model: f.Model, Term: f.Term, Kind: f.Kind}
		prev := states[k]
		prev.Key = k
		next, tr := alerts.Step(prev, f, m.Watch.ConfirmRuns, now)
		if tr == nil && prev.State == alerts.StateNone {
			continue // nothing open and nothing to open: no row
		}
		if err := al.store.SaveAlertTx(ctx, tx, next, tr, fitID); err != nil {
			return err
		}
		if tr != nil && tr.Deliver && len(al.receivers) > 0 {
			if err := al.store.EnqueueTx(ctx, tx, al.receivers, alerts.NewAlert(next, al.dashboard)); err != nil {
				return err
			}
		}
	}
	return nil
}

// judgeFamily is the false-discovery-rate control across the models of one
// schedule (Benjamini & Hochberg 1995). Each refit records its model's
// p-value for the slot (the smallest Holm-adjusted p-value of its
// comparison: a valid p-value for "nothing changed in this model"). The
// refit that completes the slot's family — every model of the schedule has
// recorded the slot, failures included — runs the step-up procedure over
// the family and judges every member's shift findings: a breach counts only
// for a discovery. Members are serialised by a transaction-level advisory
// lock on (schedule, slot), taken by onRecord before anything else, so
// exactly one refit sees the family complete.
func (al *alerter) judgeFamily(ctx context.Context, tx pgx.Tx, m *config.Model, res *jobs.Result, now time.Time) error {
	var p *float64
	if res.Report != nil {
		if v := smallestAdjustedP(res); !math.IsNaN(v) {
			p = &v
		}
	}
	before, err := al.store.SlotTestsTx(ctx, tx, m.Schedule, res.Slot)
	if err != nil {
		return err
	}
	if err := al.store.RecordSlotTestTx(ctx, tx, m.Schedule, res.Slot, m.Name, res.FitID, p); err != nil {
		return err
	}
	for _, t := range before {
		if t.Model == m.Name {
			// This model had reported the slot already (a repeat): the
			// family was judged, or will be, without counting it twice.
			return nil
		}
	}
	tests, err := al.store.SlotTestsTx(ctx, tx, m.Schedule, res.Slot)
	if err != nil {
		return err
	}
	if len(tests) < al.family[m.Schedule] {
		return nil // the family is not complete yet: the last member judges it
	}
	ps := make([]float64, len(tests))
	for i, t := range tests {
		ps[i] = t.P
	}
	discovered := alerts.BenjaminiHochberg(ps, al.fdr)
	for i, t := range tests {
		member, ok := al.models[t.Model]
		if !ok || t.FitID == 0 || math.IsNaN(t.P) {
			continue // not compared (or failed): its shift alerts keep their state
		}
		var (
			refID int64
			rep   = res.Report
		)
		if t.Model == m.Name && t.FitID == res.FitID {
			refID = res.ReferenceID
		} else {
			_, refID, rep, err = al.store.ReportForFitTx(ctx, tx, t.FitID)
			if errors.Is(err, history.ErrNoFit) {
				continue
			} else if err != nil {
				return err
			}
		}
		findings := shiftFindings(member.Name, rep, refID, t.FitID, discovered[i])
		for j := range findings {
			findings[j].Numbers["fdr_family"] = len(tests)
			findings[j].Numbers["fdr_level"] = al.fdr
		}
		if err := al.apply(ctx, tx, member, t.FitID, findings, true, now); err != nil {
			return fmt.Errorf("judge model %q in the family of schedule %q: %w", member.Name, member.Schedule, err)
		}
	}
	return nil
}

// smallestAdjustedP is the smallest adjusted p-value among a comparison's
// tested terms and its level (NaN when none was tested).
func smallestAdjustedP(res *jobs.Result) float64 {
	p := math.NaN()
	take := func(v float64) {
		if math.IsNaN(p) || v < p {
			p = v
		}
	}
	for _, t := range res.Report.Terms {
		if t.Verdict != "" && t.Verdict != "not compared" {
			take(t.PAdjusted)
		}
	}
	if l := res.Report.Level; l.Verdict != "" && l.Verdict != "not compared" {
		take(l.PAdjusted)
	}
	return p
}

package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"github.com/curvewatch/curvewatch/fit/family"
)

// ErrNotFittedRows marks a predictive check whose rows were said to be the
// candidate's own but are not the rows it was fitted on (or were said to be
// held out but are exactly them).
var ErrNotFittedRows = errors.New("the rows are not the ones the candidate was fitted on")

// PredictiveDegradation asks whether the reference model still predicts the
// candidate's data as well as the candidate itself does. On the rows of src
// both documents predict the mean μ, and each prediction is scored by the
// family's deviance
//
//	D = Σᵢ wᵢ d(yᵢ, μᵢ)
//
// with d the unit deviance, y the spec's response column and w its prior
// weights column (1 without one). The ratio
//
//	Ratio = D_ref / (D_cand + 2·φ_cand·EDF_cand)
//
// is near 1 when nothing has changed and grows when the reference's curves
// no longer fit; it breaches above 1 + tol.DevianceIncrease. tol is used as
// given (a DevianceIncrease of 0 breaches on any increase): fill in the
// defaults first with Tolerance.WithDefaults.
//
// The term 2·φ·EDF is the optimism of the candidate's in-sample deviance:
// a model scored on the rows it was fitted on looks better than it would on
// new rows from the same process by about twice the scale times its
// effective degrees of freedom (Efron 1986, "How biased is the apparent
// error rate of a prediction rule?", JASA 81; exact in expectation for a
// gaussian linear smoother with fixed smoothing strengths and known scale,
// first order otherwise). The correction assumes src holds
// exactly the candidate's fitted rows, and that is checked: the rows the fit
// would use (every model column present) must reproduce the candidate's row
// fingerprint and count, else the error wraps ErrNotFittedRows. The rows
// must carry the response (and weights) columns, and the candidate's time
// column when its document records a window.
//
// With heldOut, src holds rows neither fit saw (a later window, a held-out
// split): both deviances are then honest out-of-sample scores and the
// optimism is 0. Rows identical to the candidate's fitted set are refused
// (ErrNotFittedRows), and so is a set mostly made of the candidate's rows,
// as estimated from its row sketch. Rows the reference was fitted on are
// not refused, but they flatter it and so hide degradation.
//
// Rows with a missing or non-finite value in a model column (covariates,
// response, weights, offset) are skipped, as the fit skips them; Rows
// counts the rows scored. With AR(1) errors (a spec's serial section) the
// deviance ignores the correlation, and the optimism is then only a guide.
func PredictiveDegradation(ctx context.Context, ref, cand *Document, src Source, tol Tolerance, heldOut bool) (*Degradation, error) {
	if ref == nil || cand == nil || ref.Spec == nil || cand.Spec == nil {
		return nil, errors.New("predictive check: a fit document without its model spec")
	}
	if math.IsNaN(tol.DevianceIncrease) || tol.DevianceIncrease < 0 {
		return nil, fmt.Errorf("predictive check: deviance increase %g must be zero or more", tol.DevianceIncrease)
	}
	if err := sameDevianceModel(ref, cand); err != nil {
		return nil, err
	}
	fam, _, err := family.New(string(cand.Family), string(cand.Link))
	if err != nil {
		return nil, fmt.Errorf("model %q: %w", cand.Model, err)
	}
	refPred, err := NewPredictor(ref)
	if err != nil {
		return nil, fmt.Errorf("the reference of model %q: %w", ref.Model, err)
	}
	candPred, err := NewPredictor(cand)
	if err != nil {
		return nil, fmt.Errorf("the candidate of model %q: %w", cand.Model, err)
	}

	spec := cand.Spec
	numeric, text := spec.Columns()
	// The fit hashed its time column with the rows: read it too, so that
	// the row hashes compare with the candidate's. Held-out rows may lack
	// it; their row set is then not checked.
	comparable := true
	if w := cand.Data.Window; w != nil && !slices.Contains(numeric, w.Column) {
		if heldOut && !slices.Contains(src.Columns(), w.Column) {
			comparable = false
		} else {
			numeric = append(numeric, w.Column)
		}
	}
	if err := degradationColumns(src.Columns(), numeric, text, cand); err != nil {
		return nil, err
	}
	need := Need{Numeric: numeric, Text: text}
	filter := rowFilter{numeric: numeric, text: text}
	hasher := newRowHasher()

	var dRef, dCand float64
	var keep []int
	used, read, skipped, extrapolated := 0, 0, 0, 0
	err = src.Scan(ctx, need, func(b *Block) error {
		var err error
		if keep, err = filter.keep(b, keep, nil); err != nil {
			return err
		}
		one := oneBlock{b: b}
		var pr, pc Prediction
		if err := refPred.Predict(ctx, one, func(p Prediction) error { pr = p; return nil }); err != nil {
			return err
		}
		if err := candPred.Predict(ctx, one, func(p Prediction) error { pc = p; return nil }); err != nil {
			return err
		}
		y := b.Numeric[spec.Response]
		var w []float64
		if spec.Weights != "" {
			w = b.Numeric[spec.Weights]
		}
		skipped += b.Rows - len(keep)
		for _, r := range keep {
			if pr.Missing[r] || pc.Missing[r] {
				skipped++
				continue // cannot happen after the filter; kept for safety
			}
			if pr.OutOfRange[r] {
				extrapolated++
			}
			wi := 1.0
			if w != nil {
				if wi = w[r]; wi < 0 {
					return &RowError{Line: lineOf(b, r, read), Column: spec.Weights, Err: fmt.Errorf("prior weights cannot be negative (got %g)", wi)}
				}
			}
			if err := fam.CheckResponse(y[r], wi); err != nil {
				return &RowError{Line: lineOf(b, r, read), Column: spec.Response, Err: err}
			}
			a, c := wi*fam.UnitDeviance(y[r], pr.Response[r]), wi*fam.UnitDeviance(y[r], pc.Response[r])
			if !finite(a) || !finite(c) {
				return &RowError{Line: lineOf(b, r, read), Column: spec.Response,
					Err: fmt.Errorf("response %g has no finite deviance against the predicted means %g (reference) and %g (candidate)", y[r], pr.Response[r], pc.Response[r])}
			}
			dRef += a
			dCand += c
			hasher.add(hasher.hash(b, r, need))
			used++
		}
		read += b.Rows
		return nil
	})
	if err != nil {
		return nil, err
	}
	if used == 0 {
		return nil, fmt.Errorf("model %q: no row has every model column present, so there is nothing to score the predictions on", cand.Model)
	}
	if comparable {
		if err := checkRowSet(cand, hasher, used, heldOut); err != nil {
			return nil, err
		}
	}

	d := &Degradation{Rows: used, ReferenceDeviance: dRef, CandidateDeviance: dCand, HeldOut: heldOut, Skipped: skipped, Extrapolated: extrapolated}
	if !heldOut {
		d.Optimism = 2 * cand.Scale * cand.EDFTotal
	}
	den := dCand + d.Optimism
	switch {
	case den > 0:
		d.Ratio = dRef / den
	case dRef == 0:
		d.Ratio = 1 // both predict every row exactly
	default:
		return nil, fmt.Errorf("model %q: the candidate predicts every row exactly (deviance 0), so no ratio can be formed", cand.Model)
	}
	d.Breach = d.Ratio > 1+tol.DevianceIncrease
	return d, nil
}

// sameDevianceModel checks the two documents score rows the same way: the
// same family, link, response, weights and offset.
func sameDevianceModel(ref, cand *Document) error {
	type key struct {
		fam                       Family
		link                      Link
		response, weights, offset string
	}
	a := key{ref.Family, ref.Link, ref.Spec.Response, ref.Spec.Weights, ref.Spec.Offset}
	b := key{cand.Family, cand.Link, cand.Spec.Response, cand.Spec.Weights, cand.Spec.Offset}
	if a != b {
		return fmt.Errorf("predictive check: the reference (%s %s, response %q, weights %q, offset %q) and the candidate (%s %s, response %q, weights %q, offset %q) are not fits of the same model",
			a.fam, a.link, a.response, a.weights, a.offset, b.fam, b.link, b.response, b.weights, b.offset)
	}
	return nil
}

// degradationColumns checks src has every column the check reads, naming
// the response (and weights) apart, since prediction alone does not need
// them.
func degradationColumns(have, numeric, text []string, cand *Document) error {
	spec := cand.Spec
	if !slices.Contains(have, spec.Response) {
		return fmt.Errorf("the rows lack the response column %q of model %q: the predictive check compares predictions with the observed response", spec.Response, cand.Model)
	}
	if spec.Weights != "" && !slices.Contains(have, spec.Weights) {
		return fmt.Errorf("the rows lack the weights column %q of model %q, which the deviance needs", spec.Weights, cand.Model)
	}
	if w := cand.Data.Window; w != nil && slices.Contains(numeric, w.Column) && !slices.Contains(have, w.Column) {
		return fmt.Errorf("the rows lack the time column %q that model %q's candidate was fitted with, so they cannot be checked to be its fitted rows", w.Column, cand.Model)
	}
	var missing []string
	for _, c := range slices.Concat(numeric, text) {
		if !slices.Contains(have, c) {
			missing = append(missing, strconv.Quote(c))
		}
	}
	if len(missing) > 0 {
		return fmt.Errorf("the rows lack column(s) %s that the predictive check of model %q needs", strings.Join(missing, ", "), cand.Model)
	}
	return nil
}

// heldOutLimit is the estimated share of "held-out" rows that may come from
// the candidate's own fit before the check refuses them.
const heldOutLimit = 0.5

// checkRowSet compares the scored rows with the candidate's fitted rows:
// the same set when the optimism is corrected, a different one when the
// rows are held out.
func checkRowSet(cand *Document, h *rowHasher, n int, heldOut bool) error {
	fp := fmt.Sprintf("%016x", h.sum)
	same := fp == cand.Data.Fingerprint && n == cand.Data.RowsUsed
	if !heldOut {
		if same {
			return nil
		}
		return fmt.Errorf("%w: %d usable rows with fingerprint %s, but model %q's candidate was fitted on %d rows with fingerprint %s, and the optimism correction needs exactly those rows",
			ErrNotFittedRows, n, fp, cand.Model, cand.Data.RowsUsed, cand.Data.Fingerprint)
	}
	if same {
		return fmt.Errorf("%w: they are exactly the rows model %q's candidate was fitted on, not held-out rows", ErrNotFittedRows, cand.Model)
	}
	if share, ok := sketchContainment(h.sketch, cand.Data.Sketch); ok && share >= heldOutLimit {
		return fmt.Errorf("%w: about %.0f%% of the held-out rows are rows model %q's candidate was fitted on; held-out rows must be new to it",
			ErrNotFittedRows, 100*share, cand.Model)
	}
	return nil
}

// sketchContainment estimates the share of the rows behind sketch a that
// are also in the fitted rows behind sketch b, from the hashes of a below
// b's largest one (b holds every fitted row hash up to there). It reports
// false when fewer than 10 hashes of a fall there: too few to say.
func sketchContainment(a, b []uint64) (float64, bool) {
	if len(b) == 0 {
		return 0, false
	}
	limit := uint64(math.MaxUint64)
	if len(b) == sketchSize {
		limit = b[len(b)-1]
	}
	below, both := 0, 0
	for _, x := range a {
		if x > limit {
			break
		}
		below++
		if _, found := slices.BinarySearch(b, x); found {
			both++
		}
	}
	if below < 10 {
		return 0, false
	}
	return float64(both) / float64(below), true
}

// oneBlock is a Source holding one block already read, so that both
// documents predict the same rows in a single pass over the source.
type oneBlock struct{ b *Block }

func (o oneBlock) Columns() []string {
	var cols []string
	for c := range o.b.Numeric {
		cols = append(cols, c)
	}
	for c := range o.b.Text {
		cols = append(cols, c)
	}
	return cols
}

func (o oneBlock) Scan(ctx context.Context, _ Need, fn func(*Block) error) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	return fn(o.b)
}

package web

import (
	"errors"
	"net/http"
	"slices"
	"time"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// Page sizes of the paged lists (fits, comparisons, alert events).
const (
	defaultPage = 50
	maxPage     = 500
)

// z95 is the standard normal 0.975 quantile, for 95% intervals. source:
// common practice (no source).
const z95 = 1.959963984540054

type window struct {
	First time.Time `json:"first"`
	Last  time.Time `json:"last"`
}

// verdict is the latest comparison of a fit as the candidate.
type verdict struct {
	ComparisonID   int64    `json:"comparison_id"`
	ReferenceFitID int64    `json:"reference_fit_id"`
	Breach         bool     `json:"breach"`
	Shifted        []string `json:"shifted"`
}

// fitSummary is one fit without its curves.
type fitSummary struct {
	ID              int64      `json:"id"`
	Model           string     `json:"model"`
	Status          string     `json:"status"`
	Reason          *string    `json:"reason"`
	Slot            *time.Time `json:"slot"`
	Started         time.Time  `json:"started"`
	Finished        time.Time  `json:"finished"`
	DurationSeconds float64    `json:"duration_seconds"`
	Window          *window    `json:"window"`
	// The figures are null for a failed refit.
	RowsRead          *int64   `json:"rows_read"`
	RowsUsed          *int64   `json:"rows_used"`
	Deviance          *float64 `json:"deviance"`
	DevianceExplained *float64 `json:"deviance_explained"`
	EDFTotal          *float64 `json:"edf_total"`
	Scale             *float64 `json:"scale"`
	Converged         *bool    `json:"converged"`
	// IsBaseline marks the model's pinned baseline.
	IsBaseline bool `json:"is_baseline"`
	// Comparison is the latest comparison of this fit with a reference,
	// null when it was not compared.
	Comparison *verdict `json:"comparison"`
}

func newFitSummary(f *history.StoredFit, baseline int64, v *history.Verdict) fitSummary {
	out := fitSummary{ID: f.ID, Model: f.Model, Status: string(f.Status), Started: f.Started, Finished: f.Finished,
		DurationSeconds: f.Duration.Seconds(), IsBaseline: baseline != 0 && f.ID == baseline}
	if !f.Slot.IsZero() {
		out.Slot = &f.Slot
	}
	if f.Window != nil {
		out.Window = &window{First: f.Window.First, Last: f.Window.Last}
	}
	if f.Status == history.StatusFailed {
		out.Reason = &f.Reason
	} else {
		out.RowsRead, out.RowsUsed = &f.RowsRead, &f.RowsUsed
		out.Deviance, out.DevianceExplained = num(f.Deviance), num(f.DevianceExplained)
		out.EDFTotal, out.Scale = num(f.EDFTotal), num(f.Scale)
		out.Converged = &f.Converged
	}
	if v != nil {
		out.Comparison = &verdict{ComparisonID: v.ComparisonID, ReferenceFitID: v.ReferenceID, Breach: v.Breach,
			Shifted: append([]string{}, v.Shifted...)}
	}
	return out
}

// fitsAnswer is GET /api/v1/models/{model}/fits.
type fitsAnswer struct {
	Model         string       `json:"model"`
	BaselineFitID *int64       `json:"baseline_fit_id"`
	Fits          []fitSummary `json:"fits"`
	page
}

func (s *Server) listFits(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	m, fits, next, err := fetchPage(s, r, st.Fits, func(f *history.StoredFit) int64 { return f.ID })
	if err != nil {
		return err
	}
	ids := make([]int64, len(fits))
	for i, f := range fits {
		ids[i] = f.ID
	}
	verdicts, err := st.Verdicts(r.Context(), m.Name, ids)
	if err != nil {
		return err
	}
	baseline, _, err := st.Baseline(r.Context(), m.Name)
	if err != nil {
		return err
	}
	ans := fitsAnswer{Model: m.Name, BaselineFitID: nonZero(baseline), Fits: make([]fitSummary, len(fits)), page: next}
	for i := range fits {
		var v *history.Verdict
		if x, ok := verdicts[fits[i].ID]; ok {
			v = &x
		}
		ans.Fits[i] = newFitSummary(&fits[i], baseline, v)
	}
	return writeJSON(w, http.StatusOK, ans)
}

// interval is an estimate with its standard error and 95% interval.
type interval struct {
	Estimate *float64 `json:"estimate"`
	SE       *float64 `json:"se"`
	Lower    *float64 `json:"lower"`
	Upper    *float64 `json:"upper"`
}

func newInterval(est, se float64) interval {
	return interval{Estimate: num(est), SE: num(se), Lower: num(est - z95*se), Upper: num(est + z95*se)}
}

// figures are a fit's overall numbers.
type figures struct {
	// Response is the response column ("" when the document has no spec).
	Response          string   `json:"response"`
	Family            string   `json:"family"`
	Link              string   `json:"link"`
	N                 int      `json:"n"`
	Deviance          *float64 `json:"deviance"`
	NullDeviance      *float64 `json:"null_deviance"`
	DevianceExplained *float64 `json:"deviance_explained"`
	Scale             *float64 `json:"scale"`
	EDFTotal          *float64 `json:"edf_total"`
	ResidualDF        *float64 `json:"residual_df"`
	AIC               *float64 `json:"aic"`
	Criterion         string   `json:"criterion"`
	ResidualLag1      *float64 `json:"residual_lag1"`
	Converged         bool     `json:"converged"`
	Iterations        int      `json:"iterations"`
}

// curveGrid is a curve tabulated on its grid. Density, when the fit
// document records it, counts the fitted rows in equal bins along the
// axis, centred at DensityX.
type curveGrid struct {
	X        []float64 `json:"x"`
	Fit      []float64 `json:"fit"`
	SE       []float64 `json:"se"`
	Density  []float64 `json:"density"`
	DensityX []float64 `json:"density_x"`
}

type curve struct {
	Name           string      `json:"name"`
	Columns        []string    `json:"columns"`
	EDF            *float64    `json:"edf"`
	By             *string     `json:"by"`
	ByLevel        *string     `json:"by_level"`
	Range          *[2]float64 `json:"range"`
	SmoothingLimit *string     `json:"smoothing_limit"`
	Grid           *curveGrid  `json:"grid"`
}

type surface struct {
	Name        string      `json:"name"`
	Columns     []string    `json:"columns"`
	EDF         *float64    `json:"edf"`
	Interaction bool        `json:"interaction"`
	X1          []float64   `json:"x1"`
	X2          []float64   `json:"x2"`
	Fit         [][]float64 `json:"fit"`
	SE          [][]float64 `json:"se"`
	Far         [][]bool    `json:"far"`
}

type linear struct {
	Name    string      `json:"name"`
	Column  string      `json:"column"`
	Range   *[2]float64 `json:"range"`
	Aliased bool        `json:"aliased"`
	interval
}

type factorLevel struct {
	Level string `json:"level"`
	// Reference marks the level the others are coded against (estimate 0).
	Reference bool `json:"reference"`
	interval
}

type factor struct {
	Name      string        `json:"name"`
	Column    string        `json:"column"`
	Reference *string       `json:"reference"`
	Shrunk    bool          `json:"shrunk"`
	Levels    []factorLevel `json:"levels"`
}

// fitAnswer is GET /api/v1/fits/{id}.
type fitAnswer struct {
	fitSummary
	// IntervalLevel is the level of the lower/upper intervals (0.95).
	IntervalLevel float64   `json:"interval_level"`
	Figures       *figures  `json:"figures"`
	Intercept     *interval `json:"intercept"`
	Curves        []curve   `json:"curves"`
	Surfaces      []surface `json:"surfaces"`
	Linear        []linear  `json:"linear"`
	Factors       []factor  `json:"factors"`
	Warnings      []string  `json:"warnings"`
}

func (s *Server) getFit(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	id, err := idParam(r, "fit")
	if err != nil {
		return err
	}
	f, err := st.Fit(r.Context(), id)
	if errors.Is(err, history.ErrNoFit) {
		return errorf(http.StatusNotFound, "there is no fit %d: GET /api/v1/models/{model}/fits lists a model's fits", id)
	}
	if err != nil {
		return err
	}
	baseline, _, err := st.Baseline(r.Context(), f.Model)
	if err != nil {
		return err
	}
	verdicts, err := st.Verdicts(r.Context(), f.Model, []int64{f.ID})
	if err != nil {
		return err
	}
	var v *history.Verdict
	if x, ok := verdicts[f.ID]; ok {
		v = &x
	}
	ans := fitAnswer{fitSummary: newFitSummary(f, baseline, v), IntervalLevel: 0.95,
		Curves: []curve{}, Surfaces: []surface{}, Linear: []linear{}, Factors: []factor{}, Warnings: []string{}}
	if d := f.Document; d != nil {
		fillFit(&ans, d)
	}
	return writeJSON(w, http.StatusOK, ans)
}

// fillFit adds a fit document's figures and terms to the answer.
func fillFit(ans *fitAnswer, d *fit.Document) {
	ans.Figures = &figures{Family: string(d.Family), Link: string(d.Link), N: d.N, Deviance: num(d.Deviance),
		NullDeviance: num(d.NullDeviance), DevianceExplained: num(d.DevianceExplained), Scale: num(d.Scale),
		EDFTotal: num(d.EDFTotal), ResidualDF: num(d.ResidualDF), AIC: num(d.AIC), Criterion: d.Criterion.Name,
		ResidualLag1: num(d.ResidualLag1), Converged: d.Convergence.Converged, Iterations: d.Convergence.Iterations}
	if d.Spec != nil {
		ans.Figures.Response = d.Spec.Response
	}
	ic := newInterval(d.Intercept.Estimate, d.Intercept.SE)
	ans.Intercept = &ic
	ans.Warnings = append(ans.Warnings, d.Warnings...)
	for i := range d.Terms {
		t := &d.Terms[i]
		switch t.Kind {
		case fit.Curve:
			c := curve{Name: t.Name, Columns: nonNil(t.Columns), EDF: num(t.EDF), By: nonZero(t.By), ByLevel: nonZero(t.ByLevel),
				SmoothingLimit: nonZero(t.SmoothingLimit)}
			if len(t.Range) > 0 {
				c.Range = &t.Range[0]
			}
			if g := t.Grid; g != nil {
				c.Grid = &curveGrid{X: g.X, Fit: g.Fit, SE: g.SE}
				c.Grid.Density, c.Grid.DensityX = density(g)
			}
			ans.Curves = append(ans.Curves, c)
		case fit.Surface:
			sf := surface{Name: t.Name, Columns: nonNil(t.Columns), EDF: num(t.EDF), Interaction: t.Interaction}
			if g := t.SurfaceGrid; g != nil {
				sf.X1, sf.X2, sf.Fit, sf.SE, sf.Far = g.X1, g.X2, g.Fit, g.SE, g.Far
			}
			ans.Surfaces = append(ans.Surfaces, sf)
		case fit.Linear:
			l := linear{Name: t.Name, Column: first(t.Columns, t.Name), Aliased: len(t.Aliased) > 0}
			if len(t.Range) > 0 {
				l.Range = &t.Range[0]
			}
			if t.Estimate != nil && t.SE != nil {
				l.interval = newInterval(*t.Estimate, *t.SE)
			}
			ans.Linear = append(ans.Linear, l)
		case fit.Factor:
			fa := factor{Name: t.Name, Column: first(t.Columns, t.Name), Reference: nonZero(t.Reference), Shrunk: t.Shrunk}
			if t.Reference != "" && !t.Shrunk {
				fa.Levels = append(fa.Levels, factorLevel{Level: t.Reference, Reference: true, interval: newInterval(0, 0)})
			}
			names := make([]string, 0, len(t.Levels))
			for name := range t.Levels {
				names = append(names, name)
			}
			slices.Sort(names)
			for _, name := range names {
				e := t.Levels[name]
				fa.Levels = append(fa.Levels, factorLevel{Level: name, interval: newInterval(e.Estimate, e.SE)})
			}
			if fa.Levels == nil {
				fa.Levels = []factorLevel{}
			}
			ans.Factors = append(ans.Factors, fa)
		}
	}
}

// density returns the grid's row counts per bin and the bins' centres,
// or nils when the document has none (fits recorded before the engine
// kept them).
func density(g *fit.CurveGrid) (counts, centres []float64) {
	k := len(g.Density)
	if k == 0 || len(g.X) < 2 {
		return nil, nil
	}
	lo, hi := g.X[0], g.X[len(g.X)-1]
	centres = make([]float64, k)
	for i := range centres {
		centres[i] = lo + (hi-lo)*(float64(i)+0.5)/float64(k)
	}
	return g.Density, centres
}

func nonNil[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}

func first(s []string, def string) string {
	if len(s) > 0 {
		return s[0]
	}
	return def
}

package web

import (
	"fmt"
	"net/http"
	"slices"
	"strings"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// Model states, as the fleet page shows them (modelSummary.State).
const (
	// StateNoData: no refit has been recorded yet.
	StateNoData = "no_data"
	// StateFailing: the latest refit failed or did not converge, or a
	// refit_failing alert is firing.
	StateFailing = "failing"
	// StateShifted: the latest comparison breached the tolerance, or a
	// shift alert is firing.
	StateShifted = "shifted"
	// StateStale: a data_stale alert is firing (the source stopped).
	StateStale = "stale"
	// StateAwaiting: fitted, but nothing compared yet (the first fit is
	// the baseline).
	StateAwaiting = "awaiting"
	// StateSteady: the latest comparison was within the tolerance.
	StateSteady = "steady"
)

// fitRef is a short description of one refit.
type fitRef struct {
	ID       int64     `json:"id"`
	Status   string    `json:"status"`
	Finished time.Time `json:"finished"`
	// Reason says why a failed refit failed (null otherwise).
	Reason            *string  `json:"reason"`
	RowsUsed          *int64   `json:"rows_used"`
	DevianceExplained *float64 `json:"deviance_explained"`
}

func newFitRef(b *history.FitBrief) *fitRef {
	if b == nil {
		return nil
	}
	f := &fitRef{ID: b.ID, Status: string(b.Status), Finished: b.Finished}
	if b.Status == history.StatusFailed {
		f.Reason = &b.Reason
		return f
	}
	f.RowsUsed = &b.RowsUsed
	f.DevianceExplained = num(b.DevianceExplained)
	return f
}

// termResult is one term of a comparison, without its grids.
type termResult struct {
	Term      string   `json:"term"`
	Kind      string   `json:"kind"`
	Verdict   string   `json:"verdict"`
	Score     *float64 `json:"score"`
	Size      *float64 `json:"size"`
	PAdjusted *float64 `json:"p_adjusted"`
}

// comparisonSummary is one comparison without its report.
type comparisonSummary struct {
	ID             int64     `json:"id"`
	ReferenceFitID int64     `json:"reference_fit_id"`
	CandidateFitID int64     `json:"candidate_fit_id"`
	Breach         bool      `json:"breach"`
	Created        time.Time `json:"created"`
	// DegradationRatio is null when the comparison had no new rows to
	// score; PValue null when no test was made.
	DegradationRatio *float64 `json:"degradation_ratio"`
	PValue           *float64 `json:"p_value"`
	// WorstTerm and WorstScore name the term with the largest shift score
	// (null with no terms).
	WorstTerm  *string      `json:"worst_term"`
	WorstScore *float64     `json:"worst_score"`
	Shifted    []string     `json:"shifted"`
	Terms      []termResult `json:"terms"`
}

func newComparisonSummary(c *history.ComparisonBrief) *comparisonSummary {
	if c == nil {
		return nil
	}
	out := &comparisonSummary{ID: c.ID, ReferenceFitID: c.ReferenceID, CandidateFitID: c.CandidateID,
		Breach: c.Breach, Created: c.Created, DegradationRatio: num(c.DegradationRatio), PValue: num(c.PValue),
		Shifted: []string{}, Terms: make([]termResult, len(c.Terms))}
	worst := -1.0
	for i, t := range c.Terms {
		out.Terms[i] = termResult{Term: t.Term, Kind: string(t.Kind), Verdict: t.Verdict,
			Score: num(t.Score), Size: num(t.Size), PAdjusted: num(t.PAdjusted)}
		if t.Verdict == "shifted" {
			out.Shifted = append(out.Shifted, t.Term)
		}
		if out.Terms[i].Score != nil && t.Score > worst {
			worst = t.Score
			out.WorstTerm, out.WorstScore = &out.Terms[i].Term, out.Terms[i].Score
		}
	}
	return out
}

// firingAlert is a firing alert as the fleet lists it.
type firingAlert struct {
	Kind     string    `json:"kind"`
	Term     string    `json:"term"`
	Severity string    `json:"severity"`
	Summary  string    `json:"summary"`
	Since    time.Time `json:"since"`
}

// modelSummary is one model on the fleet page.
type modelSummary struct {
	Name     string `json:"name"`
	Schedule string `json:"schedule"`
	Table    string `json:"table"`
	Against  string `json:"against"`
	// State is one of the State… constants; StateText says it in a
	// sentence.
	State     string `json:"state"`
	StateText string `json:"state_text"`
	// LastRefit is the latest refit of any status, LastSuccess the latest
	// succeeded one (null when none).
	LastRefit   *fitRef `json:"last_refit"`
	LastSuccess *fitRef `json:"last_success"`
	// DevianceExplained is the latest success's.
	DevianceExplained *float64           `json:"deviance_explained"`
	BaselineFitID     *int64             `json:"baseline_fit_id"`
	LatestComparison  *comparisonSummary `json:"latest_comparison"`
	// WorstShiftScore and Breach repeat the latest comparison's worst
	// score and breach (null when there is none).
	WorstShiftScore *float64      `json:"worst_shift_score"`
	Breach          *bool         `json:"breach"`
	AlertsPending   int           `json:"alerts_pending"`
	FiringAlerts    []firingAlert `json:"firing_alerts"`
	// Page is the model's dashboard page (a path on this server).
	Page string `json:"page"`
}

// summarize builds a model's summary from its status and firing alerts.
func summarize(m *Model, st history.ModelStatus, firing []alerts.Status) modelSummary {
	out := modelSummary{Name: m.Name, Schedule: m.Schedule, Table: m.Table, Against: m.Against,
		LastRefit: newFitRef(st.LastFit), LastSuccess: newFitRef(st.LastSuccess),
		BaselineFitID: nonZero(st.BaselineID), LatestComparison: newComparisonSummary(st.Comparison),
		AlertsPending: st.Pending, FiringAlerts: []firingAlert{}, Page: "/models/" + m.Name}
	if out.LastSuccess != nil {
		out.DevianceExplained = out.LastSuccess.DevianceExplained
	}
	if c := out.LatestComparison; c != nil {
		out.WorstShiftScore, out.Breach = c.WorstScore, &c.Breach
	}
	kinds := map[alerts.Kind]bool{}
	for _, a := range firing {
		since := a.FiringSince
		if since.IsZero() {
			since = a.Since
		}
		out.FiringAlerts = append(out.FiringAlerts, firingAlert{Kind: string(a.Kind), Term: a.Term,
			Severity: a.Kind.Severity(), Summary: a.Summary, Since: since})
		kinds[a.Kind] = true
	}
	out.State, out.StateText = modelState(st, out.LatestComparison, kinds)
	return out
}

// modelState says where a model stands, most urgent first: not watched at
// all (failing, stale), then moved (shifted), then fine.
func modelState(st history.ModelStatus, c *comparisonSummary, firing map[alerts.Kind]bool) (string, string) {
	lf := st.LastFit
	switch {
	case lf == nil:
		return StateNoData, "No refit has run yet."
	case lf.Status == history.StatusFailed:
		return StateFailing, fmt.Sprintf("The latest refit (fit %d) failed: %s", lf.ID, lf.Reason)
	case lf.Status == history.StatusUnconverged:
		return StateFailing, fmt.Sprintf("The latest refit (fit %d) did not converge; its curves are kept but not trusted.", lf.ID)
	case firing[alerts.KindRefitFailing]:
		return StateFailing, "Refits have been failing (a refit_failing alert is firing)."
	case firing[alerts.KindDataStale]:
		return StateStale, "The source has stopped delivering new rows (a data_stale alert is firing)."
	case c != nil && c.Breach:
		what := "the comparison breached the tolerance"
		if len(c.Shifted) > 0 {
			what = strings.Join(c.Shifted, ", ") + " shifted beyond the band and the practical margin"
		}
		return StateShifted, fmt.Sprintf("Fit %d vs fit %d: %s.", c.CandidateFitID, c.ReferenceFitID, what)
	case firing[alerts.KindCurveShift] || firing[alerts.KindCoefficientShift] || firing[alerts.KindLevelShift] || firing[alerts.KindDegradation]:
		return StateShifted, "A shift alert is firing."
	case c == nil:
		return StateAwaiting, fmt.Sprintf("Fit %d has nothing to be compared with yet.", lf.ID)
	}
	return StateSteady, fmt.Sprintf("Fit %d vs fit %d: within the tolerance.", c.CandidateFitID, c.ReferenceFitID)
}

// fleetAnswer is GET /api/v1/models.
type fleetAnswer struct {
	GeneratedAt time.Time      `json:"generated_at"`
	Writable    bool           `json:"writable"`
	Counts      map[string]int `json:"counts"`
	Models      []modelSummary `json:"models"`
}

// firingByModel returns the firing alerts, by model.
func firingByModel(r *http.Request, st *history.Store, model string) (map[string][]alerts.Status, error) {
	list, err := st.Alerts(r.Context(), history.AlertFilter{Model: model, States: []alerts.State{alerts.StateFiring}})
	if err != nil {
		return nil, err
	}
	out := map[string][]alerts.Status{}
	for _, a := range list {
		out[a.Model] = append(out[a.Model], a)
	}
	return out, nil
}

func (s *Server) listModels(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	var statuses []history.ModelStatus
	if len(s.names) > 0 { // Fleet(nil) would list every model in the history
		var err error
		if statuses, err = st.Fleet(r.Context(), s.names); err != nil {
			return err
		}
	}
	firing, err := firingByModel(r, st, "")
	if err != nil {
		return err
	}
	ans := fleetAnswer{GeneratedAt: s.now().UTC(), Writable: s.Writable(), Counts: map[string]int{},
		Models: make([]modelSummary, 0, len(statuses))}
	for _, state := range []string{StateSteady, StateShifted, StateFailing, StateStale, StateAwaiting, StateNoData} {
		ans.Counts[state] = 0
	}
	for _, ms := range statuses {
		m := s.byName[ms.Name]
		if m == nil {
			continue
		}
		sum := summarize(m, ms, firing[ms.Name])
		ans.Counts[sum.State]++
		ans.Models = append(ans.Models, sum)
	}
	return writeJSON(w, http.StatusOK, ans)
}

// modelConfig is the part of a model's config that the API shows.
type modelConfig struct {
	Schedule      string   `json:"schedule"`
	Table         string   `json:"table"`
	Window        string   `json:"window"`
	WindowSeconds float64  `json:"window_seconds"`
	Against       string   `json:"against"`
	MaxAgeSeconds *float64 `json:"max_age_seconds"`
	Watch         watch    `json:"watch"`
}

// watch is the model's tolerance.
type watch struct {
	PracticalShift   float64 `json:"practical_shift"`
	Level            float64 `json:"level"`
	DevianceIncrease float64 `json:"deviance_increase"`
	NoiseRatio       float64 `json:"noise_ratio"`
	Multiplicity     string  `json:"multiplicity"`
	ConfirmRuns      *int    `json:"confirm_runs"`
}

// modelAnswer is GET /api/v1/models/{model}.
type modelAnswer struct {
	modelSummary
	Config      modelConfig `json:"config"`
	Writable    bool        `json:"writable"`
	GeneratedAt time.Time   `json:"generated_at"`
}

func (s *Server) getModel(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	m, err := s.model(r)
	if err != nil {
		return err
	}
	statuses, err := st.Fleet(r.Context(), []string{m.Name})
	if err != nil {
		return err
	}
	if len(statuses) != 1 {
		return fmt.Errorf("fleet status of model %q: %d rows", m.Name, len(statuses))
	}
	firing, err := firingByModel(r, st, m.Name)
	if err != nil {
		return err
	}
	t := m.Tolerance
	ans := modelAnswer{
		modelSummary: summarize(m, statuses[0], firing[m.Name]),
		Config: modelConfig{Schedule: m.Schedule, Table: m.Table, Window: formatDuration(m.Window),
			WindowSeconds: m.Window.Seconds(), Against: m.Against,
			Watch: watch{PracticalShift: t.PracticalShift, Level: t.Level, DevianceIncrease: t.DevianceIncrease,
				NoiseRatio: t.NoiseRatio, Multiplicity: t.Multiplicity, ConfirmRuns: nonZero(m.ConfirmRuns)}},
		Writable:    s.Writable(),
		GeneratedAt: s.now().UTC(),
	}
	if m.MaxAge > 0 {
		ans.Config.MaxAgeSeconds = num(m.MaxAge.Seconds())
	}
	return writeJSON(w, http.StatusOK, ans)
}

// formatDuration writes whole days as "30d" and anything else as Go does.
func formatDuration(d time.Duration) string {
	if d > 0 && d%(24*time.Hour) == 0 {
		return fmt.Sprintf("%dd", d/(24*time.Hour))
	}
	return d.String()
}

// historyPoint is one fit on the history charts.
type historyPoint struct {
	FitID             int64     `json:"fit_id"`
	Status            string    `json:"status"`
	Finished          time.Time `json:"finished"`
	DevianceExplained *float64  `json:"deviance_explained"`
	ComparisonID      *int64    `json:"comparison_id"`
	ReferenceFitID    *int64    `json:"reference_fit_id"`
	Breach            *bool     `json:"breach"`
	// Scores holds each compared term's shift score ({} when the fit was
	// not compared).
	Scores map[string]*float64 `json:"scores"`
}

// historyAnswer is GET /api/v1/models/{model}/history.
type historyAnswer struct {
	Model string `json:"model"`
	// Terms lists every term that has a score in Points, by name.
	Terms  []string       `json:"terms"`
	Points []historyPoint `json:"points"`
}

// History lengths of GET …/history.
const (
	defaultHistory = 500
	maxHistory     = history.MaxHistory
)

func (s *Server) scoreHistory(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	m, err := s.model(r)
	if err != nil {
		return err
	}
	limit, _, err := pageParams(r, defaultHistory, maxHistory)
	if err != nil {
		return err
	}
	points, err := st.ScoreHistory(r.Context(), m.Name, limit)
	if err != nil {
		return err
	}
	ans := historyAnswer{Model: m.Name, Terms: []string{}, Points: make([]historyPoint, len(points))}
	seen := map[string]bool{}
	for i, p := range points {
		hp := historyPoint{FitID: p.FitID, Status: string(p.Status), Finished: p.Finished,
			DevianceExplained: num(p.DevianceExplained), Scores: map[string]*float64{}}
		if c := p.Comparison; c != nil {
			hp.ComparisonID, hp.ReferenceFitID, hp.Breach = &c.ID, &c.ReferenceID, &c.Breach
			for _, t := range c.Terms {
				hp.Scores[t.Term] = num(t.Score)
				if !seen[t.Term] {
					seen[t.Term] = true
					ans.Terms = append(ans.Terms, t.Term)
				}
			}
		}
		ans.Points[i] = hp
	}
	slices.Sort(ans.Terms)
	return writeJSON(w, http.StatusOK, ans)
}

package web

import (
	"errors"
	"net/http"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// comparisonsAnswer is GET /api/v1/models/{model}/comparisons.
type comparisonsAnswer struct {
	Model       string              `json:"model"`
	Comparisons []comparisonSummary `json:"comparisons"`
	page
}

func (s *Server) listComparisons(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	m, list, next, err := fetchPage(s, r, st.Comparisons, func(c *history.ComparisonBrief) int64 { return c.ID })
	if err != nil {
		return err
	}
	ans := comparisonsAnswer{Model: m.Name, Comparisons: make([]comparisonSummary, len(list)), page: next}
	for i := range list {
		ans.Comparisons[i] = *newComparisonSummary(&list[i])
	}
	return writeJSON(w, http.StatusOK, ans)
}

// comparisonAnswer is GET /api/v1/comparisons/{id}: the summary and the
// whole shift report (format curvewatch-compare/1).
type comparisonAnswer struct {
	comparisonSummary
	Model  string           `json:"model"`
	Report *fit.ShiftReport `json:"report"`
}

func (s *Server) getComparison(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	id, err := idParam(r, "comparison")
	if err != nil {
		return err
	}
	c, err := st.Comparison(r.Context(), id)
	if errors.Is(err, history.ErrNoComparison) {
		return errorf(http.StatusNotFound, "there is no comparison %d: GET /api/v1/models/{model}/comparisons lists a model's comparisons", id)
	}
	if err != nil {
		return err
	}
	return writeJSON(w, http.StatusOK, comparisonAnswer{comparisonSummary: *newComparisonSummary(&c.ComparisonBrief),
		Model: c.Model, Report: c.Report})
}

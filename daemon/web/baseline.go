package web

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"

	"github.com/curvewatch/curvewatch/jobs/history"
)

// pinRequest is the body of POST /api/v1/models/{model}/baseline.
type pinRequest struct {
	FitID *int64 `json:"fit_id"`
}

// pinAnswer says what was pinned.
type pinAnswer struct {
	Model         string `json:"model"`
	BaselineFitID int64  `json:"baseline_fit_id"`
	// PreviousBaselineFitID is the baseline it replaced (null when none).
	PreviousBaselineFitID *int64 `json:"previous_baseline_fit_id"`
	PinnedBy              string `json:"pinned_by"`
	// Note warns when the pin has no effect on comparisons yet.
	Note *string `json:"note"`
}

// maxPinBody bounds the body of a pin request.
const maxPinBody = 4 << 10

func (s *Server) pinBaseline(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	if err := s.authorize(r); err != nil {
		return err
	}
	m, err := s.model(r)
	if err != nil {
		return err
	}
	body, err := io.ReadAll(io.LimitReader(r.Body, maxPinBody+1))
	if err != nil {
		return errorf(http.StatusBadRequest, "reading the body failed: %v; send {\"fit_id\": N}", err)
	}
	if len(body) > maxPinBody {
		return errorf(http.StatusBadRequest, "the body is over %d bytes: send only {\"fit_id\": N}", maxPinBody)
	}
	var req pinRequest
	dec := json.NewDecoder(bytes.NewReader(body))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&req); err != nil {
		return errorf(http.StatusBadRequest, "the body is not {\"fit_id\": N}: %v", err)
	}
	if dec.More() {
		return errorf(http.StatusBadRequest, "the body has more than one JSON value: send only {\"fit_id\": N}")
	}
	if req.FitID == nil || *req.FitID < 1 {
		return errorf(http.StatusBadRequest, "fit_id is missing or not a positive id: send {\"fit_id\": N} with N a succeeded fit of model %q", m.Name)
	}
	id := *req.FitID
	f, err := st.FitSummary(r.Context(), id)
	if errors.Is(err, history.ErrNoFit) {
		return errorf(http.StatusNotFound, "there is no fit %d: GET /api/v1/models/%s/fits lists the model's fits", id, m.Name)
	}
	if err != nil {
		return err
	}
	if f.Model != m.Name {
		return errorf(http.StatusNotFound, "fit %d is a fit of model %q, not of %q: pin one of this model's fits", id, f.Model, m.Name)
	}
	if f.Status != history.StatusSucceeded {
		return errorf(http.StatusBadRequest, "fit %d %s; only a succeeded fit can be the baseline: pick another from GET /api/v1/models/%s/fits", id, statusPhrase(f), m.Name)
	}
	prev, _, err := st.Baseline(r.Context(), m.Name)
	if err != nil {
		return err
	}
	if err := st.PinBaseline(r.Context(), m.Name, id, history.PinnedOperator); err != nil {
		if errors.Is(err, history.ErrNoFit) {
			return errorf(http.StatusNotFound, "fit %d is no longer a fit of model %q", id, m.Name)
		}
		return err
	}
	s.log.Info("baseline pinned through the API", "model", m.Name, "fit", id, "previous", prev, "remote", r.RemoteAddr)
	ans := pinAnswer{Model: m.Name, BaselineFitID: id, PreviousBaselineFitID: nonZero(prev), PinnedBy: history.PinnedOperator}
	if m.Against != "" && m.Against != "baseline" {
		note := fmt.Sprintf("model %q compares each fit with the previous one (watch.against: %s): the baseline is used only with against: baseline", m.Name, m.Against)
		ans.Note = &note
	}
	return writeJSON(w, http.StatusOK, ans)
}

func statusPhrase(f *history.StoredFit) string {
	if f.Status == history.StatusFailed {
		return "failed (" + f.Reason + ")"
	}
	return "is " + string(f.Status)
}

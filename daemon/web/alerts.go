package web

import (
	"net/http"
	"time"

	"github.com/curvewatch/curvewatch/alerts"
	"github.com/curvewatch/curvewatch/jobs/history"
)

// alertStatus is one stored alert.
type alertStatus struct {
	Model       string         `json:"model"`
	Term        string         `json:"term"`
	Kind        string         `json:"kind"`
	Severity    string         `json:"severity"`
	State       string         `json:"state"`
	Since       time.Time      `json:"since"`
	FiringSince *time.Time     `json:"firing_since"`
	Consecutive int            `json:"consecutive"`
	Summary     string         `json:"summary"`
	Numbers     map[string]any `json:"numbers"`
}

// alertsAnswer is GET /api/v1/alerts.
type alertsAnswer struct {
	Alerts []alertStatus `json:"alerts"`
}

func (s *Server) listAlerts(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	var filter history.AlertFilter
	if name := r.URL.Query().Get("model"); name != "" {
		if _, ok := s.byName[name]; !ok {
			return errorf(http.StatusNotFound, "no model named %q is configured: GET /api/v1/models lists the models", name)
		}
		filter.Model = name
	}
	for _, v := range csvParam(r, "state") {
		switch state := alerts.State(v); state {
		case alerts.StatePending, alerts.StateFiring, alerts.StateResolved:
			filter.States = append(filter.States, state)
		default:
			return errorf(http.StatusBadRequest, "state=%s: give pending, firing or resolved (several separated by commas)", v)
		}
	}
	list, err := st.Alerts(r.Context(), filter)
	if err != nil {
		return err
	}
	ans := alertsAnswer{Alerts: make([]alertStatus, 0, len(list))}
	for _, a := range list {
		if _, ok := s.byName[a.Model]; !ok {
			continue // a model no longer configured
		}
		out := alertStatus{Model: a.Model, Term: a.Term, Kind: string(a.Kind), Severity: a.Kind.Severity(),
			State: string(a.State), Since: a.Since, Consecutive: a.Consecutive, Summary: a.Summary, Numbers: a.Numbers}
		if !a.FiringSince.IsZero() {
			out.FiringSince = &a.FiringSince
		}
		ans.Alerts = append(ans.Alerts, out)
	}
	return writeJSON(w, http.StatusOK, ans)
}

// alertEvent is one change of an alert's state.
type alertEvent struct {
	ID       int64          `json:"id"`
	Model    string         `json:"model"`
	Term     string         `json:"term"`
	Kind     string         `json:"kind"`
	Severity string         `json:"severity"`
	State    string         `json:"state"`
	At       time.Time      `json:"at"`
	Summary  string         `json:"summary"`
	Numbers  map[string]any `json:"numbers"`
	FitID    *int64         `json:"fit_id"`
}

// alertEventsAnswer is GET /api/v1/models/{model}/alert-events.
type alertEventsAnswer struct {
	Model  string       `json:"model"`
	Events []alertEvent `json:"events"`
	page
}

func (s *Server) listAlertEvents(w http.ResponseWriter, r *http.Request, st *history.Store) error {
	m, list, next, err := fetchPage(s, r, st.AlertEvents, func(e *history.AlertEvent) int64 { return e.ID })
	if err != nil {
		return err
	}
	ans := alertEventsAnswer{Model: m.Name, Events: make([]alertEvent, len(list)), page: next}
	for i, e := range list {
		ans.Events[i] = alertEvent{ID: e.ID, Model: e.Model, Term: e.Term, Kind: string(e.Kind),
			Severity: e.Kind.Severity(), State: string(e.State), At: e.At, Summary: e.Summary,
			Numbers: e.Numbers, FitID: nonZero(e.FitID)}
	}
	return writeJSON(w, http.StatusOK, ans)
}

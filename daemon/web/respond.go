package web

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"strconv"
	"strings"
)

// apiHeaders sets the headers every API answer carries.
func apiHeaders(w http.ResponseWriter) {
	h := w.Header()
	h.Set("Content-Type", "application/json; charset=utf-8")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Content-Type-Options", "nosniff")
}

// writeJSON writes v as the answer with the given status. It encodes into
// a buffer first, so that an encoding failure still gets a JSON error.
func writeJSON(w http.ResponseWriter, status int, v any) error {
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(false)
	if err := enc.Encode(v); err != nil {
		return fmt.Errorf("encode the answer: %w", err)
	}
	w.WriteHeader(status)
	_, _ = w.Write(buf.Bytes())
	return nil
}

// errorBody is every error answer.
type errorBody struct {
	Error string `json:"error"`
}

func writeError(w http.ResponseWriter, status int, msg string) {
	_ = writeJSON(w, status, errorBody{Error: msg})
}

// num maps NaN and ±Inf, which JSON cannot hold, to null.
func num(f float64) *float64 {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return nil
	}
	return &f
}

// nonZero maps 0 to null (ids, counts that 0 means "none").
func nonZero[T comparable](v T) *T {
	var zero T
	if v == zero {
		return nil
	}
	return &v
}

// pageParams reads ?limit= (1…max, default def) and ?before= (an id; 0
// or absent for the newest).
func pageParams(r *http.Request, def, maxLimit int) (limit int, before int64, err error) {
	q := r.URL.Query()
	limit = def
	if v := q.Get("limit"); v != "" {
		n, perr := strconv.Atoi(v)
		if perr != nil || n < 1 || n > maxLimit {
			return 0, 0, errorf(http.StatusBadRequest, "limit=%s: give a whole number from 1 to %d (default %d)", v, maxLimit, def)
		}
		limit = n
	}
	if v := q.Get("before"); v != "" {
		n, perr := strconv.ParseInt(v, 10, 64)
		if perr != nil || n < 1 {
			return 0, 0, errorf(http.StatusBadRequest, "before=%s: give the id from the previous page's next_before (a positive whole number), or leave it out for the newest", v)
		}
		before = n
	}
	return limit, before, nil
}

// idParam reads the path's {id}.
func idParam(r *http.Request, what string) (int64, error) {
	v := r.PathValue("id")
	n, err := strconv.ParseInt(v, 10, 64)
	if err != nil || n < 1 {
		return 0, errorf(http.StatusBadRequest, "%s id %q: give a positive whole number", what, v)
	}
	return n, nil
}

// model returns the configured model the path's {model} names.
func (s *Server) model(r *http.Request) (*Model, error) {
	name := r.PathValue("model")
	m, ok := s.byName[name]
	if !ok {
		return nil, errorf(http.StatusNotFound, "no model named %q is configured: GET /api/v1/models lists the models", name)
	}
	return m, nil
}

// page is the cursor part of a paged answer.
type page struct {
	// NextBefore is the before= of the next (older) page, null on the last.
	NextBefore *int64 `json:"next_before"`
	// Next is the next page's URL, null on the last.
	Next *string `json:"next"`
}

// nextPage builds the cursor: more is whether rows beyond this page
// exist, last the id of this page's last (oldest) row.
func nextPage(r *http.Request, more bool, last int64, limit int) page {
	if !more {
		return page{}
	}
	q := url.Values{}
	for k, v := range r.URL.Query() {
		if k != "before" && k != "limit" {
			q[k] = v
		}
	}
	q.Set("limit", strconv.Itoa(limit))
	q.Set("before", strconv.FormatInt(last, 10))
	u := r.URL.Path + "?" + q.Encode()
	return page{NextBefore: &last, Next: &u}
}

// fetchPage reads one page of a model's list, newest first: the model
// named in the path, the page's items (at most the limit; fetch is asked
// for one more to learn whether another page follows) and the link to the
// next page (empty on the last), keyed by each item's id.
func fetchPage[T any](s *Server, r *http.Request, fetch func(ctx context.Context, model string, limit int, before int64) ([]T, error), id func(*T) int64) (*Model, []T, page, error) {
	m, err := s.model(r)
	if err != nil {
		return nil, nil, page{}, err
	}
	limit, before, err := pageParams(r, defaultPage, maxPage)
	if err != nil {
		return nil, nil, page{}, err
	}
	list, err := fetch(r.Context(), m.Name, limit+1, before)
	if err != nil {
		return nil, nil, page{}, err
	}
	if len(list) <= limit {
		return m, list, page{}, nil
	}
	list = list[:limit]
	return m, list, nextPage(r, true, id(&list[limit-1]), limit), nil
}

// csv splits the values of a repeatable, comma-separated query parameter.
func csvParam(r *http.Request, key string) []string {
	var out []string
	for _, v := range r.URL.Query()[key] {
		for _, p := range strings.Split(v, ",") {
			if p = strings.TrimSpace(p); p != "" {
				out = append(out, p)
			}
		}
	}
	return out
}

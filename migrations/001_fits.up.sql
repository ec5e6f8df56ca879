-- Models and their fit history: one row per refit, and each fitted curve's
-- grid as rows so that a SQL dashboard can plot it without parsing JSON.
-- golang-migrate runs this file as one implicit transaction (one simple-query
-- message), so it applies completely or not at all.

CREATE TABLE models (
    name       text PRIMARY KEY,
    spec       jsonb,
    created_at timestamptz NOT NULL DEFAULT now(),
    updated_at timestamptz NOT NULL DEFAULT now()
);
COMMENT ON TABLE models IS 'One row per configured model; fits, comparisons, baselines and watermarks refer to it by name.';
COMMENT ON COLUMN models.name IS 'The model''s name, as in the daemon config (models[].name).';
COMMENT ON COLUMN models.spec IS 'The model spec the daemon last loaded (the JSON form of fit.Spec); NULL while the model has failed before its spec could be read.';
COMMENT ON COLUMN models.created_at IS 'When the model was first seen.';
COMMENT ON COLUMN models.updated_at IS 'When the spec was last written.';

CREATE TABLE fits (
    id                 bigserial PRIMARY KEY,
    model              text NOT NULL REFERENCES models (name) ON UPDATE CASCADE,
    status             text NOT NULL CHECK (status IN ('succeeded', 'failed', 'unconverged')),
    reason             text,
    slot               timestamptz,
    started_at         timestamptz NOT NULL,
    finished_at        timestamptz NOT NULL,
    duration_seconds   double precision GENERATED ALWAYS AS (extract(epoch FROM finished_at - started_at)::double precision) STORED,
    window_first       timestamptz,
    window_last        timestamptz,
    rows_read          bigint CHECK (rows_read >= 0),
    rows_used          bigint CHECK (rows_used >= 0 AND rows_used <= rows_read),
    deviance           double precision,
    deviance_explained double precision,
    edf_total          double precision,
    scale              double precision,
    converged          boolean,
    document           jsonb,
    CONSTRAINT fits_finished_after_started CHECK (finished_at >= started_at),
    CONSTRAINT fits_window_ordered CHECK (window_first <= window_last),
    CONSTRAINT fits_window_both_or_neither CHECK ((window_first IS NULL) = (window_last IS NULL)),
    CONSTRAINT fits_failure_has_reason CHECK (status <> 'failed' OR reason IS NOT NULL),
    CONSTRAINT fits_fit_has_document CHECK (status = 'failed' OR document IS NOT NULL),
    -- Lets baselines and comparisons require that a fit belongs to their model.
    CONSTRAINT fits_model_id_key UNIQUE (model, id)
);
-- A scheduled slot has at most one successful fit, however many replicas or
-- retries ran it.
CREATE UNIQUE INDEX fits_one_success_per_slot ON fits (model, slot)
    WHERE status = 'succeeded' AND slot IS NOT NULL;
-- History pages, newest first, per model.
CREATE INDEX fits_model_id_idx ON fits (model, id DESC);

COMMENT ON TABLE fits IS 'One row per refit of a model, successful or not: the history of the model''s fits.';
COMMENT ON COLUMN fits.id IS 'Fit id, increasing in the order fits were recorded.';
COMMENT ON COLUMN fits.model IS 'The model fitted (models.name).';
COMMENT ON COLUMN fits.status IS 'succeeded: the fit converged and its document is stored; unconverged: a document is stored but the penalised IRLS did not converge; failed: no fit, see reason.';
COMMENT ON COLUMN fits.reason IS 'Why the refit failed (status failed); NULL otherwise.';
COMMENT ON COLUMN fits.slot IS 'The scheduled slot this refit ran for; NULL for a manual run. A slot has at most one succeeded fit.';
COMMENT ON COLUMN fits.started_at IS 'When the refit started (pull included).';
COMMENT ON COLUMN fits.finished_at IS 'When the refit finished or failed.';
COMMENT ON COLUMN fits.duration_seconds IS 'finished_at - started_at in seconds (generated).';
COMMENT ON COLUMN fits.window_first IS 'Time of the earliest row used (the time column); NULL when unknown, as on most failures.';
COMMENT ON COLUMN fits.window_last IS 'Time of the latest row used; NULL when unknown.';
COMMENT ON COLUMN fits.rows_read IS 'Rows read from the source table; NULL when the refit failed before counting.';
COMMENT ON COLUMN fits.rows_used IS 'Rows fitted, after dropping rows with missing or bad values (the counts per column are in document.data.dropped).';
COMMENT ON COLUMN fits.deviance IS 'Deviance of the fit (document.deviance).';
COMMENT ON COLUMN fits.deviance_explained IS 'Fraction of the null deviance explained, in [0, 1] (document.deviance_explained).';
COMMENT ON COLUMN fits.edf_total IS 'Total effective degrees of freedom (document.edf_total).';
COMMENT ON COLUMN fits.scale IS 'Pearson scale estimate; 1 for poisson and binomial (document.scale).';
COMMENT ON COLUMN fits.converged IS 'Whether the penalised IRLS converged (document.convergence.converged); NULL on failure.';
COMMENT ON COLUMN fits.document IS 'The whole fit document (format curvewatch-fit/1), everything needed to predict and compare; NULL on failure.';

CREATE TABLE fit_curve_points (
    fit_id bigint NOT NULL REFERENCES fits (id) ON DELETE CASCADE,
    term   text NOT NULL,
    point  integer NOT NULL CHECK (point >= 0),
    x      double precision NOT NULL,
    fit    double precision NOT NULL,
    se     double precision NOT NULL,
    -- Also the index on (fit_id, term) that a dashboard's query uses.
    PRIMARY KEY (fit_id, term, point)
);
COMMENT ON TABLE fit_curve_points IS 'Each fitted curve tabulated on its grid, one row per grid point, for plotting in SQL (surfaces stay in fits.document only).';
COMMENT ON COLUMN fit_curve_points.fit_id IS 'The fit (fits.id).';
COMMENT ON COLUMN fit_curve_points.term IS 'The curve term''s name; a curve by a factor has one term per level, named column[factor=level].';
COMMENT ON COLUMN fit_curve_points.point IS 'Position on the grid, 0 first; x increases with it.';
COMMENT ON COLUMN fit_curve_points.x IS 'Covariate value of the grid point.';
COMMENT ON COLUMN fit_curve_points.fit IS 'The centred curve at x, on the link scale.';
COMMENT ON COLUMN fit_curve_points.se IS 'Standard error of fit at x (Bayesian posterior, link scale).';

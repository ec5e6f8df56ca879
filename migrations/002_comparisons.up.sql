-- Comparisons of a new fit with its reference, the pinned baselines, and the
-- watermarks that say which source rows a model has seen.

CREATE TABLE comparisons (
    id               bigserial PRIMARY KEY,
    model            text NOT NULL,
    reference_fit_id bigint NOT NULL,
    candidate_fit_id bigint NOT NULL,
    breach           boolean NOT NULL,
    report           jsonb NOT NULL,
    created_at       timestamptz NOT NULL DEFAULT now(),
    CONSTRAINT comparisons_distinct_fits CHECK (reference_fit_id <> candidate_fit_id),
    FOREIGN KEY (model, reference_fit_id) REFERENCES fits (model, id) ON UPDATE CASCADE ON DELETE CASCADE,
    FOREIGN KEY (model, candidate_fit_id) REFERENCES fits (model, id) ON UPDATE CASCADE ON DELETE CASCADE
);
CREATE INDEX comparisons_model_id_idx ON comparisons (model, id DESC);
CREATE INDEX comparisons_candidate_idx ON comparisons (candidate_fit_id);
CREATE INDEX comparisons_reference_idx ON comparisons (reference_fit_id);

COMMENT ON TABLE comparisons IS 'One row per comparison of a candidate fit with a reference fit of the same model.';
COMMENT ON COLUMN comparisons.id IS 'Comparison id, increasing in the order comparisons were recorded.';
COMMENT ON COLUMN comparisons.model IS 'The model both fits belong to (models.name).';
COMMENT ON COLUMN comparisons.reference_fit_id IS 'The reference fit (the pinned baseline, or the previous fit with a disjoint window).';
COMMENT ON COLUMN comparisons.candidate_fit_id IS 'The new fit compared with the reference.';
COMMENT ON COLUMN comparisons.breach IS 'Whether a term, the level or the predictive deviance breached the tolerance (report.breach).';
COMMENT ON COLUMN comparisons.report IS 'The whole shift report (format curvewatch-compare/1).';
COMMENT ON COLUMN comparisons.created_at IS 'When the comparison was recorded.';

CREATE TABLE comparison_terms (
    comparison_id bigint NOT NULL REFERENCES comparisons (id) ON DELETE CASCADE,
    term          text NOT NULL,
    kind          text NOT NULL CHECK (kind IN ('curve', 'linear', 'factor', 'surface')),
    verdict       text NOT NULL,
    score         double precision NOT NULL,
    size          double precision NOT NULL,
    p_adjusted    double precision NOT NULL,
    PRIMARY KEY (comparison_id, term)
);
COMMENT ON TABLE comparison_terms IS 'Per term of a comparison: how far the term moved (a copy of report.terms[] without the grids, for SQL and metrics).';
COMMENT ON COLUMN comparison_terms.comparison_id IS 'The comparison (comparisons.id).';
COMMENT ON COLUMN comparison_terms.term IS 'The term''s name, as in the fit document.';
COMMENT ON COLUMN comparison_terms.kind IS 'curve, linear, factor or surface.';
COMMENT ON COLUMN comparison_terms.verdict IS 'stable, real but small, shifted (a breach) or not compared.';
COMMENT ON COLUMN comparison_terms.score IS 'Largest standardised shift divided by the simultaneous critical value: above 1 is outside the band.';
COMMENT ON COLUMN comparison_terms.size IS 'Largest absolute shift, on the link scale.';
COMMENT ON COLUMN comparison_terms.p_adjusted IS 'p-value of no change after the multiplicity adjustment (Holm by default).';

CREATE TABLE baselines (
    model     text PRIMARY KEY REFERENCES models (name) ON UPDATE CASCADE,
    fit_id    bigint NOT NULL,
    pinned_at timestamptz NOT NULL DEFAULT now(),
    pinned_by text NOT NULL CHECK (pinned_by IN ('auto', 'operator')),
    FOREIGN KEY (model, fit_id) REFERENCES fits (model, id) ON UPDATE CASCADE ON DELETE CASCADE
);
CREATE INDEX baselines_fit_idx ON baselines (fit_id);
COMMENT ON TABLE baselines IS 'The pinned reference fit of each model compared against its baseline (watch.against: baseline).';
COMMENT ON COLUMN baselines.model IS 'The model (models.name).';
COMMENT ON COLUMN baselines.fit_id IS 'The pinned fit, a succeeded fit of the same model.';
COMMENT ON COLUMN baselines.pinned_at IS 'When it was pinned.';
COMMENT ON COLUMN baselines.pinned_by IS 'auto: the model''s first successful fit, pinned by the daemon; operator: pinned by hand (curvewatch baseline pin).';

CREATE TABLE watermarks (
    model      text PRIMARY KEY REFERENCES models (name) ON UPDATE CASCADE,
    last_seen  timestamptz NOT NULL,
    updated_at timestamptz NOT NULL DEFAULT now()
);
COMMENT ON TABLE watermarks IS 'How far each model has read its source table; advanced in the transaction that records the refit, and never moved backwards.';
COMMENT ON COLUMN watermarks.model IS 'The model (models.name).';
COMMENT ON COLUMN watermarks.last_seen IS 'The newest value of the source''s time column that a committed refit has read.';
COMMENT ON COLUMN watermarks.updated_at IS 'When the watermark was last written.';

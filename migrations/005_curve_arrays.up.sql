-- Curve grids as one row per fit and term, with the grid in arrays: a
-- refit writes a few rows instead of hundreds (each of which cost an
-- index entry and a foreign-key check). fit_curve_points stays, as a view
-- with the same columns, one row per grid point, for SQL dashboards.

CREATE TABLE fit_curves (
    fit_id bigint NOT NULL REFERENCES fits (id) ON DELETE CASCADE,
    term   text NOT NULL,
    x      double precision[] NOT NULL,
    fit    double precision[] NOT NULL,
    se     double precision[] NOT NULL,
    CONSTRAINT fit_curves_same_length CHECK (cardinality(x) = cardinality(fit) AND cardinality(x) = cardinality(se)),
    PRIMARY KEY (fit_id, term)
);
COMMENT ON TABLE fit_curves IS 'Each fitted curve''s grid (x, fit and se on the link scale, centred), one row per fit and term; the view fit_curve_points has one row per point.';
COMMENT ON COLUMN fit_curves.fit_id IS 'The fit (fits.id).';
COMMENT ON COLUMN fit_curves.term IS 'The curve''s term name (x[site=S07] for a by-level curve).';
COMMENT ON COLUMN fit_curves.x IS 'The grid''s covariate values, increasing.';
COMMENT ON COLUMN fit_curves.fit IS 'The curve at each x, on the link scale.';
COMMENT ON COLUMN fit_curves.se IS 'The pointwise standard error at each x.';

INSERT INTO fit_curves (fit_id, term, x, fit, se)
SELECT fit_id, term, array_agg(x ORDER BY point), array_agg(fit ORDER BY point), array_agg(se ORDER BY point)
FROM fit_curve_points GROUP BY fit_id, term;

DROP TABLE fit_curve_points;

CREATE VIEW fit_curve_points AS
SELECT c.fit_id, c.term, (p.n - 1)::integer AS point, p.x, p.fit, p.se
FROM fit_curves c, unnest(c.x, c.fit, c.se) WITH ORDINALITY AS p (x, fit, se, n);
COMMENT ON VIEW fit_curve_points IS 'Each fitted curve''s grid, one row per point (point from 0), for SQL dashboards: filter on fit_id and term.';

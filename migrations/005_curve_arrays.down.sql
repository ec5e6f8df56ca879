DROP VIEW fit_curve_points;

CREATE TABLE fit_curve_points (
    fit_id bigint NOT NULL REFERENCES fits (id) ON DELETE CASCADE,
    term   text NOT NULL,
    point  integer NOT NULL CHECK (point >= 0),
    x      double precision NOT NULL,
    fit    double precision NOT NULL,
    se     double precision NOT NULL,
    PRIMARY KEY (fit_id, term, point)
);

INSERT INTO fit_curve_points (fit_id, term, point, x, fit, se)
SELECT c.fit_id, c.term, (p.n - 1)::integer, p.x, p.fit, p.se
FROM fit_curves c, unnest(c.x, c.fit, c.se) WITH ORDINALITY AS p (x, fit, se, n);

DROP TABLE fit_curves;

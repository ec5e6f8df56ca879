DROP TABLE fit_curve_points;
DROP TABLE fits;
DROP TABLE models;

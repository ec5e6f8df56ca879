DROP TABLE watermarks;
DROP TABLE baselines;
DROP TABLE comparison_terms;
DROP TABLE comparisons;

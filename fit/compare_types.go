package fit

// Tolerance says when a difference between two fits is worth an alert. A
// shift breaches only when it is both real (outside the simultaneous band
// at Level, after the multiplicity adjustment) and large enough to matter
// (above PracticalShift on the link scale).
type Tolerance struct {
	// PracticalShift is the smallest curve, surface, linear or level shift
	// worth an alert, in link-scale units (default 0.5). Compare uses it as
	// given: 0 means every real shift breaches (statistics only). The
	// default enters through ToleranceFromSpec, DefaultTolerance or
	// WithDefaults.
	PracticalShift float64 `json:"practical_shift"`
	// Level is the simultaneous band level for calling a shift real
	// (default 0.99).
	Level float64 `json:"level"`
	// DevianceIncrease is the relative predictive-deviance increase that
	// breaches (default 0.15): a ratio above 1 + DevianceIncrease.
	DevianceIncrease float64 `json:"deviance_increase"`
	// NoiseRatio is the smallest scale ratio (either way) worth reporting
	// as a noise change (default 1.25).
	NoiseRatio float64 `json:"noise_ratio"`
	// Multiplicity is "holm" (default: Holm's step-down adjustment across
	// the terms of one comparison) or "none".
	Multiplicity string `json:"multiplicity"`
	// AllowOverlap lets fits whose rows or time windows overlap be
	// compared, with the documented correction (see OverlapNote), instead
	// of refusing. Fits of exactly the same rows are refused regardless.
	AllowOverlap bool `json:"allow_overlap"`
}

// Verdicts of a term shift.
const (
	// VerdictStable: no real shift (inside the band after adjustment).
	VerdictStable = "stable"
	// VerdictSmall: a real shift, but no larger than the practical margin.
	VerdictSmall = "real but small"
	// VerdictShifted: a real shift larger than the practical margin — a
	// breach.
	VerdictShifted = "shifted"
)

// ShiftReport is the result of comparing a candidate fit with a reference
// fit of the same model.
type ShiftReport struct {
	Format    string    `json:"format"` // "curvewatch-compare/1"
	Model     string    `json:"model"`
	Reference FitBrief  `json:"reference"`
	Candidate FitBrief  `json:"candidate"`
	Tolerance Tolerance `json:"tolerance"`
	// Overlap describes how far the two fits share rows.
	Overlap OverlapNote `json:"overlap"`
	// Terms has one entry per curve, surface, linear and factor term.
	Terms []TermShift `json:"terms"`
	// Level compares the overall level (intercept plus the curves' means
	// over the common grid), apart from shape changes: precisely, the
	// intercept plus the means of the curves and surfaces over their common
	// grids (for by-level curves, the reference fit's first level's) plus
	// each linear term at the middle of its common range, at the baseline
	// levels of the factors — the mean linear predictor over the common
	// covariate box. Its Verdict is VerdictNotCompared when a factor's
	// baseline level is missing from the candidate.
	Level LevelShift `json:"level"`
	// Noise compares the scale estimates (gaussian and gamma only).
	Noise *NoiseChange `json:"noise,omitempty"`
	// Degradation is set when candidate rows were given.
	Degradation *Degradation `json:"degradation,omitempty"`
	// Tests is the number of tests in the multiplicity family (the
	// compared terms and the level).
	Tests int `json:"tests"`
	// Breach is true when any term, the level, or the predictive deviance
	// breaches. A noise change alone does not breach: it is reported in
	// Noise (a sensor going noisy is a finding, but not a shifted
	// relationship).
	Breach   bool     `json:"breach"`
	Warnings []string `json:"warnings,omitempty"`
}

// FitBrief identifies one of the compared fits.
type FitBrief struct {
	N                 int         `json:"n"`
	Fingerprint       string      `json:"fingerprint"`
	Window            *TimeWindow `json:"window,omitempty"`
	DevianceExplained float64     `json:"deviance_explained"`
	Scale             float64     `json:"scale"`
	EDFTotal          float64     `json:"edf_total"`
}

// OverlapNote says whether the fits share rows and what was done about it.
type OverlapNote struct {
	// Resemblance is the estimated |A∩B|/|A∪B| of the two row sets.
	Resemblance float64 `json:"resemblance"`
	Identical   bool    `json:"identical"`
	// WindowsOverlap is set when both fits have time windows that overlap.
	WindowsOverlap bool `json:"windows_overlap"`
	// Correction says how overlapping rows were accounted for ("" when the
	// rows are disjoint).
	Correction string `json:"correction,omitempty"`
	// Shared is s, the estimated fraction of rows the fits share, from the
	// resemblance J: s = 2J/(1+J). Compare scales the variance of every
	// difference by (1 − s).
	Shared float64 `json:"shared,omitempty"`
}

// TermShift compares one term of the two fits.
type TermShift struct {
	Name    string   `json:"name"`
	Kind    TermKind `json:"kind"`
	Verdict string   `json:"verdict"`
	// Score is the largest standardised shift divided by the simultaneous
	// critical value at Level (above 1: outside the band).
	Score float64 `json:"score"`
	// Size is the largest absolute shift on the link scale.
	Size     float64 `json:"size"`
	Critical float64 `json:"critical"`
	// PValue is the probability of a standardised shift at least this
	// large under no change; PAdjusted after the multiplicity adjustment.
	PValue    float64 `json:"p_value"`
	PAdjusted float64 `json:"p_adjusted"`
	// Outside lists the covariate intervals where the shift lies outside
	// the band (curves).
	Outside [][2]float64 `json:"outside,omitempty"`
	// OutsideFraction is the share of the common grid outside the band
	// (curves and surfaces).
	OutsideFraction float64 `json:"outside_fraction"`
	// Common is the covariate range both fits had data over (per column).
	Common [][2]float64 `json:"common,omitempty"`
	// Grid holds the comparison for plotting: the common grid and, for a
	// curve, both re-centred curves, their difference and its se.
	Grid *ShiftGrid `json:"grid,omitempty"`
	// EDFChange is the candidate's EDF minus the reference's.
	EDFChange float64 `json:"edf_change"`
	// ShapeChange is "was straight, now curved", "was curved, now
	// straight" or "" (from each fit's could-be-straight check).
	ShapeChange string `json:"shape_change,omitempty"`
	// Levels holds per-level shifts of a factor (unadjusted per-level
	// z-tests; the term's verdict rests on the largest |z|).
	Levels map[string]LevelShift `json:"levels,omitempty"`
	// Surface holds a surface comparison for plotting.
	Surface *SurfaceShiftGrid `json:"surface,omitempty"`
	// Note explains anything particular about the comparison (a shrunk
	// factor's level variances, a level present in one fit only).
	Note string `json:"note,omitempty"`
}

// SurfaceShiftGrid tabulates a surface comparison on the common
// rectangle: Delta[i][j] and SE[i][j] at (X1[i], X2[j]). Points either fit
// marks far from its data are Excluded (Delta and SE 0 there) and take no
// part in the test.
type SurfaceShiftGrid struct {
	X1       []float64   `json:"x1"`
	X2       []float64   `json:"x2"`
	Delta    [][]float64 `json:"delta"`
	SE       [][]float64 `json:"se"`
	Excluded [][]bool    `json:"excluded"`
}

// ShiftGrid tabulates a curve comparison.
type ShiftGrid struct {
	X         []float64 `json:"x"`
	Reference []float64 `json:"reference"`
	Candidate []float64 `json:"candidate"`
	Delta     []float64 `json:"delta"`
	SE        []float64 `json:"se"`
}

// LevelShift is a scalar comparison: a difference, its standard error, the
// z statistic and its two-sided p-value.
type LevelShift struct {
	Reference float64 `json:"reference"`
	Candidate float64 `json:"candidate"`
	Delta     float64 `json:"delta"`
	SE        float64 `json:"se"`
	Z         float64 `json:"z"`
	PValue    float64 `json:"p_value"`
	// PAdjusted is the p-value after the multiplicity adjustment (set on
	// the model's level; per-level factor entries leave it 0).
	PAdjusted float64 `json:"p_adjusted,omitempty"`
	Verdict   string  `json:"verdict"`
}

// NoiseChange compares the two scale estimates: Ratio = candidate ÷
// reference, with its two-sided F-test p-value on the residual degrees of
// freedom.
type NoiseChange struct {
	Ratio   float64 `json:"ratio"`
	DF1     float64 `json:"df_candidate"`
	DF2     float64 `json:"df_reference"`
	PValue  float64 `json:"p_value"`
	Verdict string  `json:"verdict"` // "steady", "noisier", "quieter"
}

// Degradation compares how well the reference model predicts the
// candidate's rows with how well the candidate fits them: Ratio =
// reference deviance on the rows ÷ (candidate deviance + optimism), the
// optimism 2·φ·EDF correcting the candidate's in-sample advantage (Efron
// 1986, JASA 81, "How biased is the apparent error rate of a prediction
// rule?").
type Degradation struct {
	Rows              int     `json:"rows"`
	ReferenceDeviance float64 `json:"reference_deviance"`
	CandidateDeviance float64 `json:"candidate_deviance"`
	Optimism          float64 `json:"optimism"`
	Ratio             float64 `json:"ratio"`
	Breach            bool    `json:"breach"`
	// HeldOut says the rows were neither fit's (no optimism correction).
	HeldOut bool `json:"held_out"`
	// Skipped counts rows left out for a missing value.
	Skipped int `json:"skipped"`
	// Extrapolated counts scored rows outside the reference's covariate
	// ranges: the reference extrapolates there, which alone can raise the
	// ratio.
	Extrapolated int `json:"extrapolated"`
}

// CompareFormat names the layout of ShiftReport.
const CompareFormat = "curvewatch-compare/1"

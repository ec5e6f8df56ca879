package fit

// Document is the fit document: everything a fit found, and everything
// needed to predict from it or compare it with another fit later. It is
// what `curvewatch fit` writes as JSON and what the daemon stores.
//
// Curves are centred (they sum to zero over the fitted rows); their grid
// values and standard errors are on the link scale. Standard errors come from
// the Bayesian posterior covariance of the coefficients (Wahba 1983;
// Silverman 1985), scaled by Scale.
type Document struct {
	Format            string    `json:"format"`
	Model             string    `json:"model"`
	Family            Family    `json:"family"`
	Link              Link      `json:"link"`
	N                 int       `json:"n"`
	Deviance          float64   `json:"deviance"`
	NullDeviance      float64   `json:"null_deviance"`
	DevianceExplained float64   `json:"deviance_explained"`
	Scale             float64   `json:"scale"`
	ScaleEstimated    bool      `json:"scale_estimated"`
	EDFTotal          float64   `json:"edf_total"`
	ResidualDF        float64   `json:"residual_df"`
	LogLikelihood     float64   `json:"log_likelihood"`
	AIC               float64   `json:"aic"`
	Criterion         Criterion `json:"criterion"`
	// ResidualLag1 is the lag-one autocorrelation of the Pearson residuals
	// in row order: near 0 for independent errors; well above 0 on
	// time-ordered sensor rows means the bands are too narrow unless the
	// model accounts for serial correlation.
	ResidualLag1 float64 `json:"residual_lag1"`
	// Serial describes the AR(1) error model, when the spec has one.
	Serial      *SerialRecord `json:"serial,omitempty"`
	Intercept   Estimate      `json:"intercept"`
	Terms       []TermResult  `json:"terms"`
	Convergence Convergence   `json:"convergence"`
	Data        DataRecord    `json:"data"`
	Warnings    []string      `json:"warnings,omitempty"`
	Spec        *Spec         `json:"spec"`
	// Coefficients are the fitted β: the intercept first, then each term's
	// coefficients in order (see TermResult.Coefficients for the ranges).
	// Linear terms are per unit of their column.
	Coefficients []float64 `json:"coefficients"`
	// Covariance is the posterior covariance of Coefficients, row by row.
	Covariance [][]float64 `json:"covariance"`
}

// FormatVersion names the layout of Document.
const FormatVersion = "curvewatch-fit/1"

// Estimate is a point estimate with its standard error.
type Estimate struct {
	Estimate float64 `json:"estimate"`
	SE       float64 `json:"se"`
}

// Criterion is the smoothing-selection criterion and its value at the fit.
type Criterion struct {
	// Name is reml, gcv, ubre or none (no smoothing strength was chosen).
	Name  string  `json:"name"`
	Value float64 `json:"value"`
	// Iterations and Converged describe the final smoothing selection.
	Iterations int  `json:"iterations"`
	Converged  bool `json:"converged"`
}

// Convergence records the penalised IRLS iterations.
type Convergence struct {
	Converged bool `json:"converged"`
	// Iterations counts PIRLS steps (passes over the data that updated β).
	Iterations int `json:"iterations"`
	// RelativeChange is the last relative change of the penalised deviance.
	RelativeChange float64 `json:"relative_change"`
	// Passes counts every pass over the rows, including the first summary.
	Passes int `json:"passes"`
	// Accumulation is cross-products or householder (see DEVELOPERS.md).
	Accumulation string `json:"accumulation"`
}

// DataRecord describes the rows a fit saw.
type DataRecord struct {
	RowsRead int `json:"rows_read"`
	RowsUsed int `json:"rows_used"`
	// Dropped counts rows left out for a missing or non-finite value, by
	// the first such column of the row.
	Dropped map[string]int `json:"dropped,omitempty"`
	// Fingerprint identifies the set of rows used (hex of the sum of their
	// 64-bit hashes: the same rows in any order give the same value).
	Fingerprint string `json:"fingerprint"`
	// Sketch holds the smallest row hashes (at most 128), from which
	// RowOverlap estimates how far two fits share rows.
	Sketch []uint64 `json:"sketch"`
	// Window is the span of the time column (Options.TimeColumn, or the
	// spec's serial order) over the rows used, when there is one.
	Window *TimeWindow `json:"window,omitempty"`
}

// TermResult is one fitted term.
type TermResult struct {
	Name    string   `json:"name"`
	Kind    TermKind `json:"kind"`
	Columns []string `json:"columns"`
	EDF     float64  `json:"edf"`
	// Smoothing holds the smoothing strengths λ (one per penalty) of a
	// curve or surface, on the scale of the penalty βᵀSβ.
	Smoothing      []float64 `json:"smoothing,omitempty"`
	SmoothingFixed bool      `json:"smoothing_fixed,omitempty"`
	// SmoothingLimit is "upper" when a chosen strength reached the top of
	// its search range (the term is then, to within 1e-6 EDF, in its
	// penalty's null space: a straight line for a curve) and "lower" when
	// it reached the bottom (as rough as the basis allows).
	SmoothingLimit string `json:"smoothing_limit,omitempty"`
	// Grid tabulates a curve over its data range.
	Grid *CurveGrid `json:"grid,omitempty"`
	// Interaction is set for a surface that holds only the interaction of
	// its columns (their own curves or lines are separate terms).
	Interaction bool `json:"interaction,omitempty"`
	// SurfaceGrid tabulates a surface over its data rectangle.
	SurfaceGrid *SurfaceGrid `json:"surface_grid,omitempty"`
	// Estimate and SE are set for a linear term (per unit of its column).
	Estimate *float64 `json:"estimate,omitempty"`
	SE       *float64 `json:"se,omitempty"`
	// Reference and Levels are set for a factor: each level's difference
	// from the reference level on the link scale.
	Reference string              `json:"reference,omitempty"`
	Levels    map[string]Estimate `json:"levels,omitempty"`
	// Shrunk marks a factor whose levels are shrunk towards zero by a ridge
	// penalty (a random intercept per level): Levels then holds every level
	// (no reference), Smoothing the penalty's strength λ and LevelVariance
	// the variance of the level effects, φ/λ.
	Shrunk        bool     `json:"shrunk,omitempty"`
	LevelVariance *float64 `json:"level_variance,omitempty"`
	// By and ByLevel are set on a curve that applies to the rows of one
	// level of a factor (a spec curve with `by`, expanded to one term per
	// level, named "column[factor=level]").
	By      string `json:"by,omitempty"`
	ByLevel string `json:"by_level,omitempty"`
	// Range holds each column's [min, max] over the fitted rows.
	Range [][2]float64 `json:"range,omitempty"`
	// Coefficients locates the term's coefficients: [first, count].
	Coefficients [2]int `json:"coefficients"`
	// Basis holds what prediction needs to rebuild the model matrix.
	Basis *BasisRecord `json:"basis,omitempty"`
	// Aliased lists coefficients fixed at zero because their columns were
	// linear combinations of earlier ones (factor levels by name).
	Aliased []string `json:"aliased,omitempty"`
	// Inference holds tests about a curve or surface (see inference.go).
	Inference *TermInference `json:"inference,omitempty"`
	// Concurvity says how far the term can be mimicked by the others (see
	// concurvity.go).
	Concurvity *Concurvity `json:"concurvity,omitempty"`
}

// CurveGrid is a curve tabulated on evenly spaced points.
type CurveGrid struct {
	X   []float64 `json:"x"`
	Fit []float64 `json:"fit"`
	SE  []float64 `json:"se"`
	// Density is how the fitted rows spread along the axis, for plotting
	// beside the curve: Density[k] estimates the rows (of the curve's
	// level, for a by-level curve) with the covariate in the k-th of
	// len(Density) equal bins from X[0] to X[len(X)-1], from the fit's
	// reservoir sample of rows scaled to all of them.
	Density []float64 `json:"density,omitempty"`
}

// SurfaceGrid is a surface tabulated on a rectangular grid; Fit[i][j] is at
// (X1[i], X2[j]). Far[i][j] marks points farther than FarDistance from every
// observation, in units of each column's data range: values there are
// extrapolations and should not be read as findings.
type SurfaceGrid struct {
	X1          []float64   `json:"x1"`
	X2          []float64   `json:"x2"`
	Fit         [][]float64 `json:"fit"`
	SE          [][]float64 `json:"se"`
	Far         [][]bool    `json:"far"`
	FarDistance float64     `json:"far_distance"`
}

// BasisRecord is a curve or surface basis as stored in the document. Each
// margin is a cubic B-spline basis on Knots; the term's coefficients β map to
// B-spline coefficients through Z (Width×len(β), row-major), which absorbs
// the constraints.
type BasisRecord struct {
	Margins []MarginRecord `json:"margins"`
	Width   int            `json:"width"`
	Z       []float64      `json:"z"`
}

// MarginRecord is one B-spline margin: its knot vector and the interval
// [Lo, Hi] outside which it continues as a straight line (or wraps).
type MarginRecord struct {
	Basis Basis     `json:"basis"`
	Knots []float64 `json:"knots"`
	Lo    float64   `json:"lo"`
	Hi    float64   `json:"hi"`
	// Periodic margins wrap values into [Lo, Hi) (the period) instead of
	// continuing as a straight line.
	Periodic bool `json:"periodic,omitempty"`
}

package fit

// Family names a response distribution.
type Family string

// The response families curvewatch fits.
const (
	Gaussian Family = "gaussian"
	Poisson  Family = "poisson"
	Binomial Family = "binomial"
	Gamma    Family = "gamma"
)

// Link names a link function g, with g(μ) = η.
type Link string

// The link functions curvewatch supports.
const (
	Identity Link = "identity"
	Log      Link = "log"
	Logit    Link = "logit"
	Inverse  Link = "inverse"
)

// Selection names how smoothing strengths are chosen.
type Selection string

// Smoothing selection criteria.
const (
	REML Selection = "reml"
	GCV  Selection = "gcv"
)

// TermKind says what a term of the linear predictor is.
type TermKind string

// Kinds of term.
const (
	Curve   TermKind = "curve"
	Linear  TermKind = "linear"
	Factor  TermKind = "factor"
	Surface TermKind = "surface"
)

// Basis names the spline basis of a curve.
type Basis string

// Curve bases.
const (
	// Cubic is a natural cubic regression spline with knots at data
	// positions; its penalty is ∫f''(x)² dx exactly.
	Cubic Basis = "cubic"
	// PSpline is a cubic B-spline basis on evenly spaced knots with a
	// second-order difference penalty (Eilers & Marx 1996).
	PSpline Basis = "pspline"
	// Cyclic is a cubic spline whose value and first two derivatives agree
	// at the two ends of Period.
	Cyclic Basis = "cyclic"
)

// KnotRule says where a curve's knots go.
type KnotRule string

// Knot placement rules.
const (
	QuantileKnots KnotRule = "quantile"
	EvenKnots     KnotRule = "even"
	AllKnots      KnotRule = "all"
)

// Spec is a model spec: the YAML a user writes to describe one model.
// See ParseSpec for the accepted keys.
type Spec struct {
	Name      string     `json:"name"`
	Response  string     `json:"response"`
	Family    Family     `json:"family"`
	Link      Link       `json:"link"`
	Weights   string     `json:"weights,omitempty"`
	Offset    string     `json:"offset,omitempty"`
	Selection Selection  `json:"selection"`
	Terms     []TermSpec `json:"terms"`
	// Serial, when set, gives the errors AR(1) correlation along time
	// instead of independence (gaussian family, identity link only).
	Serial *SerialSpec `json:"serial,omitempty"`
	// Watch holds the spec's optional watch section (tolerances for
	// comparing fits) as written; the engine does not interpret it.
	Watch map[string]any `json:"watch,omitempty"`
	// Lines gives the line in the spec file of each top-level key ParseSpec
	// read ("response", "weights", …), and of "serial.order", for error
	// messages; nil for a spec that did not come from a file.
	Lines map[string]int `json:"-"`
}

// SerialSpec describes AR(1) errors on time-ordered rows: taking the rows
// in increasing order of the column Order, the errors εᵢ = yᵢ − μᵢ follow
// εᵢ = ρ εᵢ₋₁ + uᵢ with the uᵢ independent, so that corr(εᵢ, εᵢ₋₁) = ρ.
// The rows must arrive in increasing order of Order. A stretch is a run of
// rows linked this way; its first row is independent of the rows before.
type SerialSpec struct {
	// Order names the numeric column giving time. It may also be a
	// covariate.
	Order string `json:"order"`
	// Rho is the fixed lag-one correlation ρ, with −1 < ρ < 1; it is 0
	// when Estimate is set.
	Rho float64 `json:"rho,omitempty"`
	// Estimate says ρ is estimated with the fit instead of fixed.
	Estimate bool `json:"estimate,omitempty"`
	// Gap, when above 0, is the largest step in Order between two rows of
	// one stretch: a larger step starts a new stretch, independent of the
	// one before. 0 means every row follows the one before it.
	Gap float64 `json:"gap,omitempty"`
}

// TermSpec is one term of a model spec.
type TermSpec struct {
	Kind TermKind `json:"kind"`
	// Columns holds the covariate: one column, or two for a surface.
	Columns []string `json:"columns"`
	// Basis, Size, Knots and Smoothing apply to curves and surfaces. Size
	// holds one entry per column (0 means "choose": the default, or the
	// number of distinct values for knots: all). On a surface, Basis is the
	// basis both margins share, or empty when they differ (see Bases), and
	// Knots applies to both margins.
	Basis Basis    `json:"basis,omitempty"`
	Size  []int    `json:"size,omitempty"`
	Knots KnotRule `json:"knots,omitempty"`
	// Period is a cyclic curve's [start, end], the range whose ends join.
	Period []float64 `json:"period,omitempty"`
	// Bases holds a surface's basis per margin, two entries in the order
	// of Columns; nil for other terms.
	Bases []Basis `json:"bases,omitempty"`
	// Periods holds a surface's period per margin when a margin is cyclic:
	// two entries in the order of Columns, [start, end] for a cyclic margin
	// and nil for the other. It is nil when no margin is cyclic.
	Periods [][]float64 `json:"periods,omitempty"`
	// Smoothing, when set, fixes the smoothing strengths (one per penalty)
	// and skips selection for this term. On a curve with By, the one
	// strength applies to every level's curve.
	Smoothing []float64 `json:"smoothing,omitempty"`
	// By, on a curve, names a factor column: the term is then one curve
	// per level of By, each with its own smoothing strength and centred
	// over that level's rows. By is read as text.
	By string `json:"by,omitempty"`
	// Shrink, on a factor, gives every level a coefficient βₗ (no
	// reference level) and shrinks them towards zero with the ridge
	// penalty λ Σₗ βₗ², λ chosen like a smoothing strength: a random
	// intercept per level.
	Shrink bool `json:"shrink,omitempty"`
	// Line is the line of the term in the spec file (0 if unknown), for
	// error messages.
	Line int `json:"-"`
}

// Name returns the term's display name: its column, or "a,b" for a surface.
func (t TermSpec) Name() string {
	if len(t.Columns) == 2 {
		return t.Columns[0] + "," + t.Columns[1]
	}
	if len(t.Columns) == 1 {
		return t.Columns[0]
	}
	return ""
}

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
	// Watch holds the spec's optional watch section (tolerances for
	// comparing fits) as written; the engine does not interpret it.
	Watch map[string]any `json:"watch,omitempty"`
	// Lines gives the line in the spec file of each top-level key ParseSpec
	// read ("response", "weights", …), for error messages; nil for a spec
	// that did not come from a file.
	Lines map[string]int `json:"-"`
}

// TermSpec is one term of a model spec.
type TermSpec struct {
	Kind TermKind `json:"kind"`
	// Columns holds the covariate: one column, or two for a surface.
	Columns []string `json:"columns"`
	// Basis, Size, Knots, Period and Smoothing apply to curves and
	// surfaces. Size holds one entry per column (0 means "choose": the
	// default, or the number of distinct values for knots: all).
	Basis  Basis     `json:"basis,omitempty"`
	Size   []int     `json:"size,omitempty"`
	Knots  KnotRule  `json:"knots,omitempty"`
	Period []float64 `json:"period,omitempty"`
	// Smoothing, when set, fixes the smoothing strengths (one per penalty)
	// and skips selection for this term.
	Smoothing []float64 `json:"smoothing,omitempty"`
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

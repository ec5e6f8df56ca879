// Package family holds the exponential-family distributions and link
// functions of curvewatch's models: variance functions, deviance residuals,
// log-likelihoods and starting values (McCullagh & Nelder 1989, "Generalized
// Linear Models", 2nd ed., ch. 2).
package family

import (
	"fmt"
	"math"
)

// Link is a link function g with g(μ) = η.
type Link interface {
	Name() string
	// Link returns η = g(μ).
	Link(mu float64) float64
	// Inverse returns μ = g⁻¹(η).
	Inverse(eta float64) float64
	// Deriv returns dμ/dη at η.
	Deriv(eta float64) float64
	// Valid reports whether η maps to a usable mean.
	Valid(eta float64) bool
}

// Family is a response distribution.
type Family interface {
	Name() string
	// Variance is V(μ), with Var(y) = φ V(μ) / w.
	Variance(mu float64) float64
	// UnitDeviance is d(y, μ); the deviance is Σ w d(y, μ).
	UnitDeviance(y, mu float64) float64
	// LogLik is the log-likelihood of one observation with prior weight w
	// and scale φ.
	LogLik(y, mu, w, phi float64) float64
	// CheckResponse returns a non-nil error for a response value the family
	// cannot take (w is the prior weight, e.g. binomial trials).
	CheckResponse(y, w float64) error
	// Start returns a starting mean for the iterations.
	Start(y, w float64) float64
	// ValidMean reports whether μ is inside the family's mean space.
	ValidMean(mu float64) bool
	// FixedScale reports whether the scale φ is known to be 1.
	FixedScale() bool
}

// New returns the family and link with the given names, or an error naming
// the supported combinations.
func New(fam, link string) (Family, Link, error) {
	var f Family
	switch fam {
	case "gaussian":
		f = gaussian{}
	case "poisson":
		f = poisson{}
	case "binomial":
		f = binomial{}
	case "gamma":
		f = gammaFamily{}
	default:
		return nil, nil, fmt.Errorf("family %q is not one of gaussian, poisson, binomial, gamma", fam)
	}
	var l Link
	switch link {
	case "identity":
		l = identity{}
	case "log":
		l = logLink{}
	case "logit":
		l = logit{}
	case "inverse":
		l = inverse{}
	default:
		return nil, nil, fmt.Errorf("link %q is not one of identity, log, logit, inverse", link)
	}
	return f, l, nil
}

type gaussian struct{}

func (gaussian) Name() string                       { return "gaussian" }
func (gaussian) Variance(float64) float64           { return 1 }
func (gaussian) UnitDeviance(y, mu float64) float64 { return (y - mu) * (y - mu) }
func (gaussian) LogLik(y, mu, w, phi float64) float64 {
	return -0.5 * (w*(y-mu)*(y-mu)/phi + math.Log(2*math.Pi*phi/w))
}
func (gaussian) CheckResponse(y, w float64) error { return nil }
func (gaussian) Start(y, w float64) float64       { return y }
func (gaussian) ValidMean(mu float64) bool        { return !math.IsNaN(mu) && !math.IsInf(mu, 0) }
func (gaussian) FixedScale() bool                 { return false }

type poisson struct{}

func (poisson) Name() string                { return "poisson" }
func (poisson) Variance(mu float64) float64 { return mu }
func (poisson) UnitDeviance(y, mu float64) float64 {
	return 2 * (xlogy(y, y/mu) - (y - mu))
}
func (poisson) LogLik(y, mu, w, phi float64) float64 {
	lg, _ := math.Lgamma(y + 1)
	return w * (xlogy(y, mu) - mu - lg)
}
func (poisson) CheckResponse(y, w float64) error {
	if y < 0 {
		return fmt.Errorf("a poisson response is a count and cannot be negative (got %g)", y)
	}
	return nil
}
func (poisson) Start(y, w float64) float64 { return y + 0.1 }
func (poisson) ValidMean(mu float64) bool  { return mu > 0 && !math.IsInf(mu, 0) }
func (poisson) FixedScale() bool           { return true }

// binomial models a proportion y of w trials (w = 1 for a 0/1 response).
type binomial struct{}

func (binomial) Name() string                { return "binomial" }
func (binomial) Variance(mu float64) float64 { return mu * (1 - mu) }
func (binomial) UnitDeviance(y, mu float64) float64 {
	return 2 * (xlogy(y, y/mu) + xlogy(1-y, (1-y)/(1-mu)))
}
func (binomial) LogLik(y, mu, w, phi float64) float64 {
	// log C(w, wy) + wy log μ + w(1−y) log(1−μ), with w the number of trials.
	k := w * y
	lc := 0.0
	if w != 1 {
		a, _ := math.Lgamma(w + 1)
		b, _ := math.Lgamma(k + 1)
		c, _ := math.Lgamma(w - k + 1)
		lc = a - b - c
	}
	return lc + w*(xlogy(y, mu)+xlogy(1-y, 1-mu))
}
func (binomial) CheckResponse(y, w float64) error {
	if y < 0 || y > 1 {
		return fmt.Errorf("a binomial response is a 0/1 outcome or a proportion in [0, 1] (got %g); for counts of successes divide by the trials and name the trials column in weights", y)
	}
	return nil
}
func (binomial) Start(y, w float64) float64 { return (w*y + 0.5) / (w + 1) }
func (binomial) ValidMean(mu float64) bool  { return mu > 0 && mu < 1 }
func (binomial) FixedScale() bool           { return true }

type gammaFamily struct{}

func (gammaFamily) Name() string                { return "gamma" }
func (gammaFamily) Variance(mu float64) float64 { return mu * mu }
func (gammaFamily) UnitDeviance(y, mu float64) float64 {
	return 2 * (-math.Log(y/mu) + (y-mu)/mu)
}

// LogLik uses shape ν = w/φ: log f = ν log(νy/μ) − νy/μ − log y − log Γ(ν).
func (gammaFamily) LogLik(y, mu, w, phi float64) float64 {
	nu := w / phi
	lg, _ := math.Lgamma(nu)
	return nu*math.Log(nu*y/mu) - nu*y/mu - math.Log(y) - lg
}
func (gammaFamily) CheckResponse(y, w float64) error {
	if y <= 0 {
		return fmt.Errorf("a gamma response must be positive (got %g)", y)
	}
	return nil
}
func (gammaFamily) Start(y, w float64) float64 { return y }
func (gammaFamily) ValidMean(mu float64) bool  { return mu > 0 && !math.IsInf(mu, 0) }
func (gammaFamily) FixedScale() bool           { return false }

// xlogy returns x·log(y), with 0·log(anything) = 0.
func xlogy(x, y float64) float64 {
	if x == 0 {
		return 0
	}
	return x * math.Log(y)
}

type identity struct{}

func (identity) Name() string                { return "identity" }
func (identity) Link(mu float64) float64     { return mu }
func (identity) Inverse(eta float64) float64 { return eta }
func (identity) Deriv(float64) float64       { return 1 }
func (identity) Valid(eta float64) bool      { return !math.IsNaN(eta) && !math.IsInf(eta, 0) }

type logLink struct{}

func (logLink) Name() string                { return "log" }
func (logLink) Link(mu float64) float64     { return math.Log(mu) }
func (logLink) Inverse(eta float64) float64 { return math.Exp(eta) }
func (logLink) Deriv(eta float64) float64   { return math.Exp(eta) }
func (logLink) Valid(eta float64) bool      { return eta < 700 && !math.IsNaN(eta) }

type logit struct{}

func (logit) Name() string            { return "logit" }
func (logit) Link(mu float64) float64 { return math.Log(mu / (1 - mu)) }
func (logit) Inverse(eta float64) float64 {
	if eta >= 0 {
		return 1 / (1 + math.Exp(-eta))
	}
	e := math.Exp(eta)
	return e / (1 + e)
}
func (logit) Deriv(eta float64) float64 {
	e := math.Exp(-math.Abs(eta))
	return e / ((1 + e) * (1 + e))
}
func (logit) Valid(eta float64) bool { return !math.IsNaN(eta) && !math.IsInf(eta, 0) }

type inverse struct{}

func (inverse) Name() string                { return "inverse" }
func (inverse) Link(mu float64) float64     { return 1 / mu }
func (inverse) Inverse(eta float64) float64 { return 1 / eta }
func (inverse) Deriv(eta float64) float64   { return -1 / (eta * eta) }
func (inverse) Valid(eta float64) bool      { return eta != 0 && !math.IsNaN(eta) && !math.IsInf(eta, 0) }

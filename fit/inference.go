package fit

// TermInference holds tests about one curve or surface.
type TermInference struct{}

// inferTerms fills TermResult.Inference for each curve and surface. v is the
// posterior covariance of the reported coefficients (pc×pc, row-major).
func (f *fitter) inferTerms(doc *Document, st *pirlsState, v []float64) error {
	return nil
}

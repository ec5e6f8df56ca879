package fit

// Concurvity measures how far a term can be reproduced by the other terms.
type Concurvity struct{}

// concurvity fills TermResult.Concurvity for each term.
func (f *fitter) concurvity(doc *Document, st *pirlsState) error {
	return nil
}

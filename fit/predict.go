package fit

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/curvewatch/curvewatch/fit/basis"
	"github.com/curvewatch/curvewatch/fit/family"
)

// Prediction holds predictions for one block of input rows, aligned with
// the block. A row whose covariates are missing has NaN in Link, LinkSE and
// Response and Missing set.
type Prediction struct {
	Block    *Block
	Link     []float64 // η = Xβ + offset
	LinkSE   []float64 // standard error of Xβ (the offset is taken as known)
	Response []float64 // μ = g⁻¹(η)
	Missing  []bool
	// OutOfRange marks rows with a covariate outside the range the model
	// was fitted on (predictions there are extrapolations).
	OutOfRange []bool
}

// Predictor evaluates a fit document on new rows.
type Predictor struct {
	doc   *Document
	link  family.Link
	terms []predTerm
	need  Need
	pc    int

	byLevels map[string]map[string]bool
}

type predTerm struct {
	res     *TermResult
	curves  []*basis.Curve
	z       []float64
	q       int
	start   int
	column  []string
	levelAt map[string]int // factor level → coefficient offset (−1 reference)
}

// NewPredictor checks a document and prepares it for prediction.
func NewPredictor(doc *Document) (*Predictor, error) {
	if doc == nil || doc.Spec == nil {
		return nil, errors.New("the fit document has no model spec")
	}
	_, link, err := family.New(string(doc.Family), string(doc.Link))
	if err != nil {
		return nil, err
	}
	pc := len(doc.Coefficients)
	if pc == 0 || len(doc.Covariance) != pc {
		return nil, fmt.Errorf("the fit document has %d coefficients and a %d-row covariance; it is damaged", pc, len(doc.Covariance))
	}
	p := &Predictor{doc: doc, link: link, pc: pc}
	seen := map[string]bool{}
	addNeed := func(col string, text bool) {
		if seen[col] {
			return
		}
		seen[col] = true
		if text {
			p.need.Text = append(p.need.Text, col)
		} else {
			p.need.Numeric = append(p.need.Numeric, col)
		}
	}
	for i := range doc.Terms {
		tr := &doc.Terms[i]
		pt := predTerm{res: tr, start: tr.Coefficients[0], q: tr.Coefficients[1], column: tr.Columns}
		if pt.start < 1 || pt.start+pt.q > pc {
			return nil, fmt.Errorf("term %q: coefficient range %v outside the %d coefficients", tr.Name, tr.Coefficients, pc)
		}
		switch tr.Kind {
		case Curve, Surface:
			if tr.Basis == nil || len(tr.Basis.Margins) != len(tr.Columns) {
				return nil, fmt.Errorf("term %q: the document lacks its basis", tr.Name)
			}
			width := 1
			for _, mg := range tr.Basis.Margins {
				b, err := basis.NewBSpline(mg.Knots, 4)
				if err != nil {
					return nil, fmt.Errorf("term %q: %w", tr.Name, err)
				}
				pt.curves = append(pt.curves, &basis.Curve{B: b, Lo: mg.Lo, Hi: mg.Hi, Periodic: mg.Periodic})
				width *= b.Len()
			}
			if width != tr.Basis.Width || len(tr.Basis.Z) != width*pt.q {
				return nil, fmt.Errorf("term %q: basis width %d does not match its constraint matrix", tr.Name, width)
			}
			pt.z = tr.Basis.Z
			for _, c := range tr.Columns {
				addNeed(c, false)
			}
			if tr.By != "" {
				addNeed(tr.By, true)
				if p.byLevels == nil {
					p.byLevels = map[string]map[string]bool{}
				}
				if p.byLevels[tr.By] == nil {
					p.byLevels[tr.By] = map[string]bool{}
				}
				p.byLevels[tr.By][tr.ByLevel] = true
			}
		case Linear:
			addNeed(tr.Columns[0], false)
		case Factor:
			pt.levelAt = map[string]int{tr.Reference: -1}
			// Coefficients follow the sorted order of the estimated levels.
			names := make(map[string]int, len(tr.Levels))
			for l := range tr.Levels {
				names[l] = 0
			}
			for i, l := range sortLevels(names) {
				pt.levelAt[l] = i
			}
			for _, a := range tr.Aliased {
				if _, lv, ok := cut(a, "="); ok {
					pt.levelAt[lv] = -1
				}
			}
			addNeed(tr.Columns[0], true)
		default:
			return nil, fmt.Errorf("term %q: unknown kind %q", tr.Name, tr.Kind)
		}
		p.terms = append(p.terms, pt)
	}
	if off := doc.Spec.Offset; off != "" {
		addNeed(off, false)
	}
	return p, nil
}

func cut(s, sep string) (string, string, bool) {
	for i := 0; i+len(sep) <= len(s); i++ {
		if s[i:i+len(sep)] == sep {
			return s[:i], s[i+len(sep):], true
		}
	}
	return s, "", false
}

// Need lists the columns prediction reads.
func (p *Predictor) Need() Need { return p.need }

// Predict evaluates a fit document on the rows of src, calling fn once per
// block. An unseen factor level is an error naming the row.
func Predict(ctx context.Context, doc *Document, src Source, fn func(Prediction) error) error {
	p, err := NewPredictor(doc)
	if err != nil {
		return err
	}
	return p.Predict(ctx, src, fn)
}

// Predict evaluates the document on the rows of src.
func (p *Predictor) Predict(ctx context.Context, src Source, fn func(Prediction) error) error {
	var missing []string
	have := map[string]bool{}
	for _, c := range src.Columns() {
		have[c] = true
	}
	for _, c := range append(append([]string(nil), p.need.Numeric...), p.need.Text...) {
		if !have[c] {
			missing = append(missing, c)
		}
	}
	if len(missing) > 0 {
		return fmt.Errorf("the data lack column(s) %s that model %q needs", joinNames(missing), p.doc.Model)
	}
	beta, pc := p.doc.Coefficients, p.pc
	v := make([]float64, pc*pc)
	for i, row := range p.doc.Covariance {
		copy(v[i*pc:], row)
	}
	g := make([]float64, pc)
	var b1, b2 [4]float64
	return src.Scan(ctx, p.need, func(b *Block) error {
		out := Prediction{Block: b,
			Link: make([]float64, b.Rows), LinkSE: make([]float64, b.Rows), Response: make([]float64, b.Rows),
			Missing: make([]bool, b.Rows), OutOfRange: make([]bool, b.Rows)}
		for r := 0; r < b.Rows; r++ {
			clear(g)
			g[0] = 1
			ok := true
			for _, pt := range p.terms {
				switch pt.res.Kind {
				case Curve:
					x := b.Numeric[pt.column[0]][r]
					if !finite(x) {
						ok = false
						break
					}
					if by := pt.res.By; by != "" {
						lv := b.Text[by][r]
						if lv == "" {
							ok = false
							break
						}
						if !p.byLevels[by][lv] {
							return &RowError{Line: lineOf(b, r, 0), Column: by,
								Err: fmt.Errorf("level %q has no curve in model %q (its curves cover %d levels)", lv, p.doc.Model, len(p.byLevels[by]))}
						}
						if lv != pt.res.ByLevel {
							continue
						}
					}
					if x < pt.res.Range[0][0] || x > pt.res.Range[0][1] {
						out.OutOfRange[r] = true
					}
					first := pt.curves[0].Row(x, b1[:])
					for k := 0; k < 4; k++ {
						for j := 0; j < pt.q; j++ {
							g[pt.start+j] += b1[k] * pt.z[(first+k)*pt.q+j]
						}
					}
				case Surface:
					x1, x2 := b.Numeric[pt.column[0]][r], b.Numeric[pt.column[1]][r]
					if !finite(x1) || !finite(x2) {
						ok = false
						break
					}
					if x1 < pt.res.Range[0][0] || x1 > pt.res.Range[0][1] || x2 < pt.res.Range[1][0] || x2 > pt.res.Range[1][1] {
						out.OutOfRange[r] = true
					}
					f1 := pt.curves[0].Row(x1, b1[:])
					f2 := pt.curves[1].Row(x2, b2[:])
					k2 := pt.curves[1].B.Len()
					for a := 0; a < 4; a++ {
						for c := 0; c < 4; c++ {
							raw := (f1+a)*k2 + f2 + c
							w := b1[a] * b2[c]
							for j := 0; j < pt.q; j++ {
								g[pt.start+j] += w * pt.z[raw*pt.q+j]
							}
						}
					}
				case Linear:
					x := b.Numeric[pt.column[0]][r]
					if !finite(x) {
						ok = false
						break
					}
					if len(pt.res.Range) > 0 && (x < pt.res.Range[0][0] || x > pt.res.Range[0][1]) {
						out.OutOfRange[r] = true
					}
					if pt.q == 1 {
						g[pt.start] = x
					}
				case Factor:
					lv := b.Text[pt.column[0]][r]
					if lv == "" {
						ok = false
						break
					}
					j, known := pt.levelAt[lv]
					if !known {
						return &RowError{Line: lineOf(b, r, 0), Column: pt.column[0],
							Err: fmt.Errorf("level %q was not in the data model %q was fitted on (known levels: %s)", lv, p.doc.Model, levelList(factorLevels(pt)))}
					}
					if j >= 0 {
						g[pt.start+j] = 1
					}
				}
				if !ok {
					break
				}
			}
			off := 0.0
			if name := p.doc.Spec.Offset; name != "" && ok {
				off = b.Numeric[name][r]
				ok = finite(off)
			}
			if !ok {
				out.Missing[r] = true
				out.Link[r], out.LinkSE[r], out.Response[r] = math.NaN(), math.NaN(), math.NaN()
				continue
			}
			eta, se := rowFitSE(g, 0, beta, v, pc)
			out.Link[r] = eta + off
			out.LinkSE[r] = se
			out.Response[r] = p.link.Inverse(eta + off)
		}
		return fn(out)
	})
}

func factorLevels(pt predTerm) []string {
	m := make(map[string]int, len(pt.levelAt))
	for l := range pt.levelAt {
		m[l] = 0
	}
	return sortLevels(m)
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

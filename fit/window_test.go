package fit_test

import (
	"context"
	"math"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// Row sketches tell whether two fits saw the same rows: the bottom-k
// estimate of the resemblance |A∩B|/|A∪B| is within its sampling error
// (about √(J(1−J)/k) with k = 128; Broder 1997) of the truth.
func TestRowOverlap(t *testing.T) {
	x, y := rows(3000, 9)
	tcol := make([]float64, len(x))
	for i := range tcol {
		tcol[i] = float64(i)
	}
	fitRange := func(lo, hi int) *fit.Document {
		spec := curveSpec(fit.Gaussian, fit.Identity, curve("x", 6))
		doc, err := fit.Fit(context.Background(), spec, &fit.Table{Numeric: map[string][]float64{"x": x[lo:hi], "y": y[lo:hi], "t": tcol[lo:hi]}}, fit.Options{TimeColumn: "t"})
		if err != nil {
			t.Fatal(err)
		}
		return doc
	}
	a, b, c, a2 := fitRange(0, 2000), fitRange(1000, 3000), fitRange(2000, 3000), fitRange(0, 2000)
	if a.Data.Window == nil || a.Data.Window.First != 0 || a.Data.Window.Last != 1999 {
		t.Errorf("window %+v", a.Data.Window)
	}
	for _, tc := range []struct {
		name      string
		p, q      *fit.Document
		want      float64
		identical bool
	}{
		{"half overlap", a, b, 1000.0 / 3000, false},
		{"disjoint", a, c, 0, false},
		{"same rows", a, a2, 1, true},
	} {
		got, identical, err := fit.RowOverlap(&tc.p.Data, &tc.q.Data)
		if err != nil {
			t.Fatal(err)
		}
		margin := 4 * math.Sqrt(tc.want*(1-tc.want)/128)
		if math.Abs(got-tc.want) > margin+1e-12 || identical != tc.identical {
			t.Errorf("%s: resemblance %.3f (identical %v), want %.3f ± %.3f (%v)", tc.name, got, identical, tc.want, margin, tc.identical)
		}
	}
}

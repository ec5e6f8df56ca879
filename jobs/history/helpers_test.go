package history_test

import (
	"context"
	"math"
	"math/rand/v2"
	"sync"
	"testing"
	"time"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/internal/pgtest"
	"github.com/curvewatch/curvewatch/jobs/history"
	"github.com/curvewatch/curvewatch/migrations"
	"github.com/jackc/pgx/v5"
)

func TestMain(m *testing.M) { pgtest.Main(m) }

// The model the tests store fits of: two plain curves, a curve by a
// factor (one term per level), the factor, a line and a surface, so that
// every kind of term passes through the store. (The surface comes before
// the by-curve: in the engine as of this writing, a surface after a curve
// with `by` loses its data sample and is marked far from the data
// everywhere, which makes fit.Compare refuse the pair.)
const specYAML = `
name: river-test
response: y
family: gaussian
terms:
  - curve: x
    size: 8
  - surface: [x, z]
    size: [4, 4]
  - curve: w
    by: site
    size: 6
  - factor: site
  - linear: z
`

func ctxT(t *testing.T) context.Context {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	t.Cleanup(cancel)
	return ctx
}

// newStore migrates a fresh schema and opens a store on it.
func newStore(t *testing.T) (*history.Store, *pgx.Conn) {
	t.Helper()
	url, schema := pgtest.Schema(t)
	if err := migrations.Up(ctxT(t), url, schema); err != nil {
		t.Fatal(err)
	}
	s, err := history.Open(ctxT(t), url, schema)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(s.Close)
	conn, err := pgx.Connect(ctxT(t), url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close(context.Background()) })
	return s, conn
}

var (
	docsOnce sync.Once
	docs     [2]*fit.Document
	docsErr  error
)

// testDocs returns two fits of the test model on invented rows (fixed
// seeds, different rows, so that fit.Compare accepts the pair). Storage
// tests only: no numerical claim rests on them.
func testDocs(t *testing.T) (*fit.Document, *fit.Document) {
	t.Helper()
	docsOnce.Do(func() {
		spec, err := fit.ParseSpec([]byte(specYAML))
		if err != nil {
			docsErr = err
			return
		}
		for i := range docs {
			rng := rand.New(rand.NewPCG(uint64(7+i), 11))
			n := 600
			x, w, z, y := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
			site := make([]string, n)
			for r := range n {
				site[r] = []string{"A", "B"}[r%2]
				x[r], w[r], z[r] = 10*rng.Float64(), 5*rng.Float64(), rng.Float64()
				y[r] = math.Sin(x[r]/2) + 0.2*w[r] + z[r] + 0.3*rng.NormFloat64()
			}
			tab := &fit.Table{Numeric: map[string][]float64{"x": x, "w": w, "z": z, "y": y}, Text: map[string][]string{"site": site}}
			docs[i], docsErr = fit.Fit(context.Background(), spec, tab, fit.Options{})
			if docsErr != nil {
				return
			}
		}
	})
	if docsErr != nil {
		t.Fatal(docsErr)
	}
	return docs[0], docs[1]
}

// unconverged returns a copy of doc marked as not converged.
func unconverged(doc *fit.Document) *fit.Document {
	c := *doc
	c.Convergence.Converged = false
	return &c
}

var t0 = time.Date(2025, 3, 1, 3, 0, 0, 0, time.UTC)

func day(d int) time.Time { return t0.AddDate(0, 0, d) }

func record(model string, slot time.Time, doc *fit.Document) history.FitRecord {
	return history.FitRecord{Model: model, Slot: slot, Started: t0, Finished: t0.Add(1500 * time.Millisecond), Document: doc}
}

func count(t *testing.T, conn *pgx.Conn, query string, args ...any) int {
	t.Helper()
	var n int
	if err := conn.QueryRow(ctxT(t), query, args...).Scan(&n); err != nil {
		t.Fatalf("%s: %v", query, err)
	}
	return n
}

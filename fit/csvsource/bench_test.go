package csvsource_test

import (
	"bufio"
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

// writeSensorFile writes rows of a sensor-like table with 8 columns (a
// time, six readings with a few missing, and a site) to a file in dir.
func writeSensorFile(tb testing.TB, dir string, rows int) string {
	tb.Helper()
	path := filepath.Join(dir, "sensor.csv")
	file, err := os.Create(path)
	if err != nil {
		tb.Fatal(err)
	}
	w := bufio.NewWriter(file)
	rng := rand.New(rand.NewPCG(1, 2))
	fmt.Fprintln(w, "time,flow,level,temp,ph,turbidity,conductivity,site")
	for i := range rows {
		fmt.Fprintf(w, "%d", 1_700_000_000+60*i)
		for range 6 {
			if rng.IntN(100) == 0 {
				w.WriteString(",NA")
				continue
			}
			fmt.Fprintf(w, ",%.4f", rng.NormFloat64()*10+50)
		}
		fmt.Fprintf(w, ",site-%d\n", rng.IntN(12))
	}
	if err := w.Flush(); err != nil {
		tb.Fatal(err)
	}
	if err := file.Close(); err != nil {
		tb.Fatal(err)
	}
	return path
}

// BenchmarkScan streams 1e5 rows of 8 columns, reading 7 as numbers and
// one as text.
func BenchmarkScan(b *testing.B) {
	const rows = 100_000
	path := writeSensorFile(b, b.TempDir(), rows)
	info, err := os.Stat(path)
	if err != nil {
		b.Fatal(err)
	}
	src, err := csvsource.Open(path)
	if err != nil {
		b.Fatal(err)
	}
	need := fit.Need{
		Numeric: []string{"time", "flow", "level", "temp", "ph", "turbidity", "conductivity"},
		Text:    []string{"site"},
	}
	b.SetBytes(info.Size())
	b.ReportAllocs()
	for b.Loop() {
		n := 0
		err := src.Scan(context.Background(), need, func(blk *fit.Block) error {
			n += blk.Rows
			return nil
		})
		if err != nil {
			b.Fatal(err)
		}
		if n != rows {
			b.Fatalf("%d rows, want %d", n, rows)
		}
	}
	b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}

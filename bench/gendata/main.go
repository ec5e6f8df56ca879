// Command gendata writes the benchmark model's rows as CSV: four smooth
// covariates (x1–x4), two linear ones (z1, z2), a gaussian response y and a
// poisson count c. The data are invented; the seed is fixed.
package main

import (
	"bufio"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
)

func main() {
	n := flag.Int("n", 100_000, "rows to write")
	out := flag.String("out", "", "output CSV file (default: standard output)")
	flag.Parse()
	if err := write(*n, *out); err != nil {
		fmt.Fprintln(os.Stderr, "gendata:", err)
		os.Exit(1)
	}
}

func write(n int, path string) error {
	f := os.Stdout
	if path != "" {
		var err error
		if f, err = os.Create(path); err != nil {
			return err
		}
		defer f.Close()
	}
	w := bufio.NewWriterSize(f, 1<<20)
	rng := rand.New(rand.NewPCG(42, uint64(n)))
	w.WriteString("x1,x2,x3,x4,z1,z2,y,c\n")
	buf := make([]byte, 0, 256)
	for i := 0; i < n; i++ {
		x1, x2, x3, x4 := rng.Float64(), rng.Float64(), rng.Float64(), rng.Float64()
		z1, z2 := rng.NormFloat64(), rng.NormFloat64()
		eta := 0.3 + 0.5*math.Sin(2*math.Pi*x1) + 0.4*x2*x2 + 0.3*math.Exp(-3*x3) + 0.2*math.Cos(3*x4) + 0.1*z1 - 0.1*z2
		y := eta + 0.5*rng.NormFloat64()
		c := poisson(rng, math.Exp(eta))
		buf = buf[:0]
		for j, v := range []float64{x1, x2, x3, x4, z1, z2, y} {
			if j > 0 {
				buf = append(buf, ',')
			}
			buf = strconv.AppendFloat(buf, v, 'g', 10, 64)
		}
		buf = append(buf, ',')
		buf = strconv.AppendInt(buf, int64(c), 10)
		buf = append(buf, '\n')
		if _, err := w.Write(buf); err != nil {
			return err
		}
	}
	return w.Flush()
}

// poisson draws a Poisson variate by inversion (the means here are small).
func poisson(rng *rand.Rand, mean float64) int {
	u := rng.Float64()
	k, p := 0, math.Exp(-mean)
	cdf := p
	for u > cdf && k < 1000 {
		k++
		p *= mean / float64(k)
		cdf += p
	}
	return k
}

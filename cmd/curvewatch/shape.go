package main

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// sparkWidth is how many characters draw a curve in the summary.
const sparkWidth = 24

// sparkBlocks are the eight heights a sparkline is drawn with, lowest first.
var sparkBlocks = []rune("▁▂▃▄▅▆▇█")

// sparkline draws values as at most width block characters, each the mean
// of an equal share of the values, scaled so that the lowest mean gets the
// lowest block and the highest the highest. A flat curve is drawn at middle
// height.
func sparkline(values []float64, width int) string {
	n := len(values)
	width = min(width, n)
	if width <= 0 {
		return ""
	}
	means := make([]float64, width)
	for i := range means {
		lo, hi := i*n/width, (i+1)*n/width
		sum := 0.0
		for _, v := range values[lo:hi] {
			sum += v
		}
		means[i] = sum / float64(hi-lo)
	}
	lo, hi := means[0], means[0]
	for _, m := range means {
		lo, hi = math.Min(lo, m), math.Max(hi, m)
	}
	top := len(sparkBlocks) - 1
	var b strings.Builder
	for _, m := range means {
		level := top / 2
		if span := hi - lo; span > 1e-12*math.Max(1, math.Max(math.Abs(lo), math.Abs(hi))) {
			level = int(math.Round((m - lo) / span * float64(top)))
		}
		b.WriteRune(sparkBlocks[level])
	}
	return b.String()
}

// decimalsFor returns how many decimals show about digits significant
// digits of size, between 0 and 12.
func decimalsFor(size float64, digits int) int {
	if !(size > 0) || math.IsInf(size, 0) {
		return 4
	}
	d := digits - 1 - int(math.Floor(math.Log10(size)))
	return max(0, min(12, d))
}

// plusMinus formats an estimate and its standard error, rounding both to
// two significant digits of the standard error (so the estimate shows no
// digits its uncertainty swamps). signed puts a + on positive estimates,
// for differences.
func plusMinus(est, se float64, signed bool) string {
	if !(se > 0) || math.IsInf(se, 0) {
		return fmt.Sprintf("%s ± %g", signedG(est, signed), se)
	}
	d := decimalsFor(se, 2)
	verb := "%.*f"
	if signed {
		verb = "%+.*f"
	}
	return fmt.Sprintf(verb+" ± %.*f", d, est, d, se)
}

func signedG(x float64, signed bool) string {
	s := strconv.FormatFloat(x, 'g', 4, 64)
	if signed && x >= 0 {
		s = "+" + s
	}
	return s
}

// span formats the interval [lo, hi] with three significant digits of its
// width; signed puts a + on a positive end.
func span(lo, hi float64, signed bool) string {
	d := decimalsFor(hi-lo, 3)
	verb := "%.*f"
	if signed {
		verb = "%+.*f"
	}
	return fmt.Sprintf(verb+" … "+verb, d, lo, d, hi)
}

// strengths formats smoothing strengths λ.
func strengths(lambda []float64) string {
	parts := make([]string, len(lambda))
	for i, l := range lambda {
		parts[i] = strconv.FormatFloat(l, 'g', 3, 64)
	}
	return strings.Join(parts, ", ")
}

// minMax returns the smallest and largest of values (NaN for none).
func minMax(values []float64) (lo, hi float64) {
	if len(values) == 0 {
		return math.NaN(), math.NaN()
	}
	lo, hi = values[0], values[0]
	for _, v := range values {
		lo, hi = math.Min(lo, v), math.Max(hi, v)
	}
	return lo, hi
}

// plural returns "1 row" or "2 rows", counting as count does.
func plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return count(n) + " " + many
}

// count formats n with commas between groups of three digits, as in
// 1,500,000, so that large row counts read at a glance.
func count(n int) string {
	s := strconv.Itoa(n)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var b strings.Builder
	if neg {
		b.WriteByte('-')
	}
	for i, c := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(c)
	}
	return b.String()
}

package main

import (
	"math"
	"testing"
)

func TestSparkline(t *testing.T) {
	ramp := make([]float64, 200)
	for i := range ramp {
		ramp[i] = float64(i)
	}
	bowl := make([]float64, 200)
	for i := range bowl {
		x := float64(i)/199*2 - 1
		bowl[i] = x * x
	}
	cases := []struct {
		name   string
		values []float64
		width  int
		want   string
	}{
		{"rising line", []float64{0, 1, 2, 3, 4, 5, 6, 7}, 8, "▁▂▃▄▅▆▇█"},
		{"falling line", []float64{7, 6, 5, 4, 3, 2, 1, 0}, 8, "█▇▆▅▄▃▂▁"},
		{"200 points to 24", ramp, 24, "▁▁▂▂▂▃▃▃▃▄▄▄▅▅▅▆▆▆▆▇▇▇██"},
		{"bowl", bowl, 12, "█▆▄▂▁▁▁▁▂▄▆█"},
		{"flat", []float64{2, 2, 2, 2}, 4, "▄▄▄▄"},
		{"fewer points than width", []float64{0, 1}, 24, "▁█"},
		{"no points", nil, 24, ""},
	}
	for _, c := range cases {
		if got := sparkline(c.values, c.width); got != c.want {
			t.Errorf("%s: sparkline = %q, want %q", c.name, got, c.want)
		}
	}
}

func TestPlusMinus(t *testing.T) {
	cases := []struct {
		est, se float64
		signed  bool
		want    string
	}{
		{-0.02134, 0.004012, true, "-0.0213 ± 0.0040"},
		{0.5121, 0.0612, true, "+0.512 ± 0.061"},
		{10.4371, 0.0551, false, "10.437 ± 0.055"},
		{1534.2, 12.3, false, "1534 ± 12"},
		{2.5, 0, true, "+2.5 ± 0"},
		{2.5, math.NaN(), false, "2.5 ± NaN"},
	}
	for _, c := range cases {
		if got := plusMinus(c.est, c.se, c.signed); got != c.want {
			t.Errorf("plusMinus(%v, %v, %v) = %q, want %q", c.est, c.se, c.signed, got, c.want)
		}
	}
}

func TestSpan(t *testing.T) {
	cases := []struct {
		lo, hi float64
		signed bool
		want   string
	}{
		{-2.3812, 3.7466, true, "-2.38 … +3.75"},
		{1.01, 25.8, false, "1.0 … 25.8"},
		{0, 0.004, true, "+0.00000 … +0.00400"},
		{5, 5, false, "5.0000 … 5.0000"},
	}
	for _, c := range cases {
		if got := span(c.lo, c.hi, c.signed); got != c.want {
			t.Errorf("span(%v, %v) = %q, want %q", c.lo, c.hi, got, c.want)
		}
	}
}

func TestWrap(t *testing.T) {
	got := wrap("one two three four\n\nfive", "- ", "  ", 12)
	want := "- one two\n  three four\n\n  five\n"
	if got != want {
		t.Errorf("wrap = %q, want %q", got, want)
	}
}

func TestCount(t *testing.T) {
	for n, want := range map[int]string{0: "0", 999: "999", 1000: "1,000", 1500000: "1,500,000", -12345: "-12,345"} {
		if got := count(n); got != want {
			t.Errorf("count(%d) = %q, want %q", n, got, want)
		}
	}
}

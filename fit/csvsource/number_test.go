package csvsource

import (
	"math"
	"strings"
	"testing"
)

func TestParseNumber(t *testing.T) {
	nan := math.NaN()
	tests := []struct {
		in   string
		want float64
		err  string // a part of the error message
	}{
		{in: "0", want: 0},
		{in: "-0", want: math.Copysign(0, -1)},
		{in: "12", want: 12},
		{in: " 12 ", want: 12},
		{in: "\t-1.5e3\r", want: -1500},
		{in: "+.5", want: 0.5},
		{in: "5.", want: 5},
		{in: "1E-2", want: 0.01},
		{in: "1e-400", want: 0},
		{in: "1.7976931348623157e308", want: math.MaxFloat64},
		{in: "", want: nan},
		{in: "   ", want: nan},
		{in: "NA", want: nan},
		{in: "na", want: nan},
		{in: "N/A", want: nan},
		{in: "n/a", want: nan},
		{in: "NaN", want: nan},
		{in: "NAN", want: nan},
		{in: "null", want: nan},
		{in: "NULL", want: nan},
		{in: "Null", want: nan},
		{in: "Inf", want: nan},
		{in: "+inf", want: nan},
		{in: "-INF", want: nan},
		{in: "Infinity", want: nan},
		{in: "-infinity", want: nan},
		{in: "abc", err: `"abc" is not a number (leave the cell empty`},
		{in: "-", err: `"-" is not a number`},
		{in: ".", err: `"." is not a number`},
		{in: "1e", err: `"1e" is not a number`},
		{in: "1-2", err: `"1-2" is not a number`},
		{in: "1_000", err: `"1_000" is not a number`},
		{in: "0x10", err: `"0x10" is not a number`},
		{in: "0x1p3", err: `"0x1p3" is not a number`},
		{in: "-nan", err: `"-nan" is not a number`},
		{in: "NA NA", err: `"NA NA" is not a number`},
		{in: "12 mm", err: `"12 mm" is not a number`},
		{in: "1,5", err: `"1,5" is not a number: write the decimal point as '.'`},
		{in: "-1.234,5", err: `write the decimal point as '.'`},
		{in: "1,234,567", err: `write the decimal point as '.'`},
		{in: "1,234.5", err: `write the decimal point as '.'`},
		{in: "a,b", err: `"a,b" is not a number (leave the cell empty`},
		{in: "1e400", err: `"1e400" is too large for a number`},
		{in: "-1e400", err: `"-1e400" is too large for a number`},
	}
	for _, tt := range tests {
		got, err := parseNumber(tt.in)
		switch {
		case tt.err != "":
			if err == nil || !strings.Contains(err.Error(), tt.err) {
				t.Errorf("parseNumber(%q) = %v, %v; want error containing %s", tt.in, got, err, tt.err)
			}
		case err != nil:
			t.Errorf("parseNumber(%q): %v", tt.in, err)
		case math.IsNaN(tt.want) != math.IsNaN(got) || !math.IsNaN(got) && (got != tt.want || math.Signbit(got) != math.Signbit(tt.want)):
			t.Errorf("parseNumber(%q) = %v, want %v", tt.in, got, tt.want)
		}
	}
}

func TestQuoteCell(t *testing.T) {
	tests := []struct{ in, want string }{
		{"abc", `"abc"`},
		{strings.Repeat("x", 40), `"` + strings.Repeat("x", 40) + `"`},
		{strings.Repeat("x", 41), `"` + strings.Repeat("x", 40) + `"…`},
		{"x" + strings.Repeat("é", 30), `"x` + strings.Repeat("é", 19) + `"…`},
		{"a\"b\n", `"a\"b\n"`},
	}
	for _, tt := range tests {
		if got := quoteCell(tt.in); got != tt.want {
			t.Errorf("quoteCell(%q) = %s, want %s", tt.in, got, tt.want)
		}
	}
}

func TestParseNumberAllocations(t *testing.T) {
	for _, s := range []string{"12.5", " -3e2 ", "", "NA", "null", "Inf"} {
		if n := testing.AllocsPerRun(100, func() { _, _ = parseNumber(s) }); n != 0 {
			t.Errorf("parseNumber(%q): %v allocations, want 0", s, n)
		}
	}
}

package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// --without fits the model again without the term and prints the
// comparison after the usual summary, which stays as it was; the printed
// section is a golden file and --without-out holds the same comparison as
// JSON.
func TestFitWithout(t *testing.T) {
	plain, _ := fitTo(t, sondeModel)
	plain.wantCode(t, exitOK)

	cmpOut := filepath.Join(t.TempDir(), "comparison.json")
	r, out := fitTo(t, sondeModel, "--without", "flow", "--without-out", cmpOut)
	r.wantCode(t, exitOK)
	if r.stderr != "" {
		t.Errorf("--quiet, yet stderr has:\n%s", r.stderr)
	}
	section, ok := strings.CutPrefix(r.stdout, plain.stdout)
	if !ok {
		t.Fatalf("stdout does not start with the usual summary:\n%s", r.stdout)
	}
	if !strings.Contains(section, "\nwithout flow (fitted again to the same 297 rows)\n") {
		t.Errorf("the comparison section is missing:\n%s", section)
	}
	checkGolden(t, filepath.Join(cliData, "river-sonde", "without-flow.golden"), []byte(section))
	checkRequiredFields(t, out)

	var c fit.NestedComparison
	data, err := os.ReadFile(cmpOut)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(data, &c); err != nil {
		t.Fatalf("%s: %v", cmpOut, err)
	}
	if strings.Join(c.Dropped, ",") != "flow" || c.Test != "F" || c.PValue == nil || c.Reduced.Model != "sonde-oxygen without flow" {
		t.Errorf("comparison: dropped %v, test %q, p %v, reduced model %q", c.Dropped, c.Test, c.PValue, c.Reduced.Model)
	}
}

// Without --quiet, stderr names both files written.
func TestFitWithoutNotice(t *testing.T) {
	dir := t.TempDir()
	out, cmpOut := filepath.Join(dir, "fit.json"), filepath.Join(dir, "comparison.json")
	r := cli(t, "fit", "--data", sondeRowsCSV, "--model", sondeModel, "--out", out, "--without", "site", "--without-out", cmpOut)
	r.wantCode(t, exitOK)
	r.wantStderr(t, "fit: wrote "+out, "fit: wrote "+cmpOut)
}

// Dropping every term leaves the intercept-only model; dropping several
// terms names them all.
func TestFitWithoutSeveral(t *testing.T) {
	r, _ := fitTo(t, sondeModel, "--without", "water_temp", "--without", "site", "--without", "flow")
	r.wantCode(t, exitOK)
	for _, want := range []string{
		"\nwithout water_temp, flow and site (fitted again to the same 297 rows)\n",
		" with · 1.00 without · ",
		"  reading     the data support keeping water_temp, flow and site\n",
	} {
		if !strings.Contains(r.stdout, want) {
			t.Errorf("stdout lacks %q:\n%s", want, r.stdout)
		}
	}
}

func TestFitWithoutUsageErrors(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "fit.json")
	base := []string{"fit", "--data", sondeRowsCSV, "--model", sondeModel, "--out", out}
	cases := []struct {
		name  string
		args  []string
		wants []string
	}{
		{"unknown term", []string{"--without", "flow2"},
			[]string{`fit: --without: model "sonde-oxygen" has no term "flow2"; its terms are water_temp, flow, site`}},
		{"one known, two unknown", []string{"--without", "flow", "--without", "depth", "--without", "turbidity"},
			[]string{`has no terms "depth", "turbidity"; its terms are water_temp, flow, site`}},
		{"empty term", []string{"--without", " "}, []string{"invalid value"}},
		{"out without without", []string{"--without-out", filepath.Join(dir, "c.json")},
			[]string{"--without-out needs --without TERM"}},
		{"same file twice", []string{"--without", "flow", "--without-out", out},
			[]string{"--without-out and --out name the same file"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := cli(t, append(base, c.args...)...)
			r.wantCode(t, exitUsage)
			r.wantStderr(t, append(c.wants, "Run 'curvewatch fit --help'")...)
			if _, err := os.Stat(out); err == nil {
				t.Error("a usage error wrote the document")
			}
		})
	}
}

// A full fit that does not converge is not compared with anything.
func TestFitWithoutNotConverged(t *testing.T) {
	r, _ := fitTo(t, alarmsModel, "--max-iterations", "2", "--without", "site")
	r.wantCode(t, exitFailed)
	r.wantStderr(t, "did not converge", "No comparison was made without site.")
	if strings.Contains(r.stdout, "\nwithout site") {
		t.Errorf("an unconverged fit was compared:\n%s", r.stdout)
	}
}

// A surface may be named as the summary shows it or as a,b in either
// order.
func TestReducedSpecSurfaceNames(t *testing.T) {
	spec, err := fit.ParseSpec([]byte("name: pm\nresponse: y\nfamily: poisson\nterms:\n  - surface: [wind, hour]\n    size: [5, 5]\n  - linear: humidity\n"))
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"wind,hour", "wind × hour", "hour, wind", "wind×hour"} {
		red, err := reducedSpec(spec, []string{name})
		if err != nil {
			t.Errorf("%q: %v", name, err)
			continue
		}
		if len(red.Terms) != 1 || red.Terms[0].Name() != "humidity" || red.Name != "pm without wind,hour" {
			t.Errorf("%q: %q with terms %v", name, red.Name, red.Terms)
		}
	}
}

// The reading follows the p-value, and says when the AIC disagrees.
func TestWithoutReading(t *testing.T) {
	p := func(v float64) *float64 { return &v }
	cases := []struct {
		c    fit.NestedComparison
		want string
	}{
		{fit.NestedComparison{PValue: p(0.001), LowerAIC: "full"}, "the data support keeping flow"},
		{fit.NestedComparison{PValue: p(0.04), LowerAIC: "reduced"}, "the data support keeping flow (p < 0.05), though the AIC prefers the model without it"},
		{fit.NestedComparison{PValue: p(0.3), LowerAIC: "reduced"}, "dropping flow costs little: consider a simpler model"},
		{fit.NestedComparison{PValue: p(0.06), LowerAIC: "full"}, "dropping flow costs little: consider a simpler model (p ≥ 0.05), though the AIC prefers keeping it"},
		{fit.NestedComparison{DevianceChange: 2}, "the model with flow fits better for no more degrees of freedom: keep it"},
		{fit.NestedComparison{DevianceChange: -1}, "dropping flow costs nothing: consider the simpler model"},
	}
	for _, tc := range cases {
		if got := withoutReading(&tc.c, "flow", "it"); got != tc.want {
			t.Errorf("p %v, lower AIC %q: %q\nwant %q", tc.c.PValue, tc.c.LowerAIC, got, tc.want)
		}
	}
}

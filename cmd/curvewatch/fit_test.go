package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Paths of the shared fixtures.
var (
	sondeRowsCSV  = filepath.Join(cliData, "river-sonde", "rows.csv")
	sondeModel    = filepath.Join(cliData, "river-sonde", "model.yaml")
	sondeNewCSV   = filepath.Join(cliData, "river-sonde", "new.csv")
	alarmsModel   = filepath.Join(cliData, "alarm-counts", "model.yaml")
	bySiteModel   = filepath.Join(cliData, "sites-by", "model.yaml")
	badSpecModel  = filepath.Join(cliData, "bad-spec", "model.yaml")
	misspeltModel = filepath.Join(cliData, "missing-column", "model.yaml")
	unseenCSV     = filepath.Join(cliData, "unseen-level", "new.csv")
)

// fitTo fits model to the river-sonde rows, writing the document in a
// fresh folder, and returns the run and the document's path.
func fitTo(t *testing.T, model string, extra ...string) (result, string) {
	t.Helper()
	out := filepath.Join(t.TempDir(), "fit.json")
	args := append([]string{"fit", "--data", sondeRowsCSV, "--model", model, "--out", out, "--quiet"}, extra...)
	return cli(t, args...), out
}

func TestFitWritesDocumentAndSummary(t *testing.T) {
	for _, c := range []struct{ name, model string }{
		{"river-sonde", sondeModel},
		{"alarm-counts", alarmsModel},
		{"sites-by", bySiteModel},
	} {
		t.Run(c.name, func(t *testing.T) {
			r, out := fitTo(t, c.model)
			r.wantCode(t, exitOK)
			if r.stderr != "" {
				t.Errorf("--quiet, yet stderr has:\n%s", r.stderr)
			}
			checkGolden(t, filepath.Join(cliData, c.name, "summary.golden"), []byte(r.stdout))
			checkRequiredFields(t, out)
		})
	}
}

// checkRequiredFields checks the fit document at path has the fields
// DESIGN.md ("Fit document") requires, read as plain JSON.
func checkRequiredFields(t *testing.T, path string) {
	t.Helper()
	var doc map[string]any
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(data, &doc); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	for _, k := range []string{"model", "family", "link", "n", "deviance", "null_deviance", "deviance_explained", "scale", "edf_total", "intercept", "terms"} {
		if _, ok := doc[k]; !ok {
			t.Errorf("the document lacks %q", k)
		}
	}
	if de, _ := doc["deviance_explained"].(float64); de < 0 || de > 1 {
		t.Errorf("deviance_explained = %v, want a fraction in [0, 1]", doc["deviance_explained"])
	}
	ic, _ := doc["intercept"].(map[string]any)
	if _, ok := ic["se"]; !ok {
		t.Errorf("intercept = %v, want estimate and se", doc["intercept"])
	}
	kinds := map[string]bool{}
	terms, _ := doc["terms"].([]any)
	for _, raw := range terms {
		term, _ := raw.(map[string]any)
		kind, _ := term["kind"].(string)
		kinds[kind] = true
		var want []string
		switch kind {
		case "curve":
			want = []string{"name", "edf", "smoothing", "grid"}
			grid, _ := term["grid"].(map[string]any)
			for _, k := range []string{"x", "fit", "se"} {
				if v, _ := grid[k].([]any); len(v) != 200 {
					t.Errorf("curve %v: grid.%s has %d points, want 200", term["name"], k, len(v))
				}
			}
		case "linear":
			want = []string{"name", "estimate", "se"}
		case "factor":
			want = []string{"name", "levels"}
		}
		for _, k := range want {
			if _, ok := term[k]; !ok {
				t.Errorf("%s term %v lacks %q", kind, term["name"], k)
			}
		}
	}
	if !kinds["curve"] || !kinds["linear"] || !kinds["factor"] {
		t.Errorf("term kinds %v, want curve, linear and factor", kinds)
	}
}

func TestFitUsageErrors(t *testing.T) {
	out := filepath.Join(t.TempDir(), "fit.json")
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"no data", []string{"--model", sondeModel, "--out", out}, "fit: --data is required: the CSV file of rows to fit (first line: column names)"},
		{"no model", []string{"--data", sondeRowsCSV, "--out", out}, "fit: --model is required"},
		{"no out", []string{"--data", sondeRowsCSV, "--model", sondeModel}, "fit: --out is required"},
		{"unknown flag", []string{"--data", sondeRowsCSV, "--model", sondeModel, "--out", out, "--smoothness", "3"}, "fit: unknown flag --smoothness"},
		{"stray argument", []string{"--data", sondeRowsCSV, "--model", sondeModel, "--out", out, "extra.csv"}, `unexpected argument "extra.csv"`},
		{"bad iterations", []string{"--data", sondeRowsCSV, "--model", sondeModel, "--out", out, "--max-iterations", "0"}, "--max-iterations must be at least 1"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := cli(t, append([]string{"fit"}, c.args...)...)
			r.wantCode(t, exitUsage)
			r.wantStderr(t, c.want, "Run 'curvewatch fit --help'")
			if _, err := os.Stat(out); err == nil {
				t.Error("a usage error wrote the document")
			}
		})
	}
}

func TestFitErrors(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "fit.json")
	cases := []struct {
		name  string
		args  []string
		wants []string
	}{
		{"bad spec names each line", []string{"--data", sondeRowsCSV, "--model", badSpecModel, "--out", out},
			[]string{"the model spec " + badSpecModel + " has problems",
				badSpecModel + `:4: family "gausian" is not one of`,
				badSpecModel + `:8: terms[0]: knots "everywhere"`}},
		{"missing column", []string{"--data", sondeRowsCSV, "--model", misspeltModel, "--out", out},
			[]string{"uses columns that " + sondeRowsCSV + " lacks",
				misspeltModel + `:6: terms[0]: curve column "water_tmp" is not in the data: did you mean "water_temp"?`}},
		{"no data file", []string{"--data", filepath.Join(dir, "absent.csv"), "--model", sondeModel, "--out", out},
			[]string{"fit: cannot read the data", "absent.csv"}},
		{"no spec file", []string{"--data", sondeRowsCSV, "--model", filepath.Join(dir, "absent.yaml"), "--out", out},
			[]string{"fit: cannot read the model spec", "absent.yaml"}},
		{"no output folder", []string{"--data", sondeRowsCSV, "--model", sondeModel, "--out", filepath.Join(dir, "no", "fit.json")},
			[]string{"does not exist; create it first"}},
		{"output over input", []string{"--data", sondeRowsCSV, "--model", sondeModel, "--out", sondeRowsCSV},
			[]string{sondeRowsCSV + " is also an input"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := cli(t, append([]string{"fit"}, c.args...)...)
			r.wantCode(t, exitFailed)
			r.wantStderr(t, c.wants...)
			if _, err := os.Stat(out); err == nil {
				t.Error("a failed fit wrote the document")
			}
		})
	}
}

// A fit stopped before it converged still writes its document, marked so,
// says so loudly, and exits 1.
func TestFitNotConverged(t *testing.T) {
	r, out := fitTo(t, alarmsModel, "--max-iterations", "2")
	r.wantCode(t, exitFailed)
	r.wantStderr(t, "did not converge", "It was written to "+out, "--max-iterations")
	if !strings.Contains(r.stdout, "NOT CONVERGED") {
		t.Errorf("the summary does not shout NOT CONVERGED:\n%s", r.stdout)
	}
	var doc struct {
		Convergence struct{ Converged *bool } `json:"convergence"`
	}
	data, err := os.ReadFile(out)
	if err != nil {
		t.Fatalf("the unconverged document was not written: %v", err)
	}
	if err := json.Unmarshal(data, &doc); err != nil {
		t.Fatal(err)
	}
	if c := doc.Convergence.Converged; c == nil || *c {
		t.Errorf("convergence.converged = %v, want false", c)
	}
}

// The summary goes to stdout and is the same with or without --quiet;
// without it, stderr names the file written.
func TestFitNotice(t *testing.T) {
	quiet, _ := fitTo(t, sondeModel)
	out := filepath.Join(t.TempDir(), "fit.json")
	r := cli(t, "fit", "--data", sondeRowsCSV, "--model", sondeModel, "--out", out)
	r.wantCode(t, exitOK)
	if r.stdout != quiet.stdout {
		t.Errorf("the summary changed with --quiet:\n%s\nversus\n%s", r.stdout, quiet.stdout)
	}
	if r.stderr != "fit: wrote "+out+"\n" {
		t.Errorf("stderr = %q, want only the note naming %s", r.stderr, out)
	}
}

// An interrupted fit (SIGINT or SIGTERM cancel the context) writes nothing.
func TestFitInterrupted(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	out := filepath.Join(t.TempDir(), "fit.json")
	var stdout, stderr bytes.Buffer
	err := run(ctx, []string{"fit", "--data", sondeRowsCSV, "--model", sondeModel, "--out", out}, &stdout, &stderr)
	if code := exit(err, &stderr); code != exitFailed {
		t.Fatalf("exit code %d, want %d", code, exitFailed)
	}
	if want := "fit: interrupted; " + out + " was not written\n"; stderr.String() != want {
		t.Errorf("stderr = %q, want %q", stderr.String(), want)
	}
	if _, err := os.Stat(out); err == nil {
		t.Error("an interrupted fit wrote its document")
	}
}

func TestFitVerbose(t *testing.T) {
	r, _ := fitTo(t, sondeModel, "--verbose")
	r.wantCode(t, exitOK)
	r.wantStderr(t, "level=DEBUG", `msg=fitting model=sonde-oxygen`)
}

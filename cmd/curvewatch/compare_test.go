package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
)

// Paths of the compare fixtures (see compare_fixture_test.go).
var (
	compareModel   = filepath.Join(compareData, "model.yaml")
	otherSpecModel = filepath.Join(cliData, "compare-other-spec", "model.yaml")
	beforeCSV      = filepath.Join(compareData, "before.csv")
	steadyCSV      = filepath.Join(compareData, "after-steady.csv")
	fouledCSV      = filepath.Join(compareData, "after-fouled.csv")
	laterCSV       = filepath.Join(compareData, "later-fouled.csv")
)

// fitWindow fits model to the rows of csv into dir/name, failing the test
// unless the fit succeeds, and returns the document's path.
func fitWindow(t *testing.T, dir, name, csv, model string) string {
	t.Helper()
	out := filepath.Join(dir, name)
	cli(t, "fit", "--data", csv, "--model", model, "--out", out, "--quiet").wantCode(t, exitOK)
	return out
}

// comparePair fits the reference window (before.csv) and one candidate
// window with the compare-sonde model, in a fresh folder; it returns the
// folder and both documents' paths. The documents are named after their
// windows, as the human report shows them.
func comparePair(t *testing.T, candidateCSV string) (dir, ref, cand string) {
	t.Helper()
	dir = t.TempDir()
	ref = fitWindow(t, dir, "before-fit.json", beforeCSV, compareModel)
	cand = fitWindow(t, dir, strings.TrimSuffix(filepath.Base(candidateCSV), ".csv")+"-fit.json", candidateCSV, compareModel)
	return dir, ref, cand
}

// compareRun runs compare on a pair and returns the run and the report
// path.
func compareRun(t *testing.T, dir, ref, cand string, extra ...string) (result, string) {
	t.Helper()
	out := filepath.Join(dir, "report.json")
	args := append([]string{"compare", "--reference", ref, "--candidate", cand, "--out", out}, extra...)
	return cli(t, args...), out
}

// readReport reads a JSON shift report.
func readReport(t *testing.T, path string) *fit.ShiftReport {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("the report was not written: %v", err)
	}
	var rep fit.ShiftReport
	if err := json.Unmarshal(data, &rep); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return &rep
}

func shiftOf(t *testing.T, rep *fit.ShiftReport, name string) fit.TermShift {
	t.Helper()
	for _, ts := range rep.Terms {
		if ts.Name == name {
			return ts
		}
	}
	t.Fatalf("the report has no term %q", name)
	return fit.TermShift{}
}

// Two windows of the same invented truth: nothing breaches, compare exits
// 0, and the tolerance comes from the spec's watch section.
func TestCompareSteady(t *testing.T) {
	dir, ref, cand := comparePair(t, steadyCSV)
	r, out := compareRun(t, dir, ref, cand)
	r.wantCode(t, exitOK)
	if r.stderr != "compare: wrote "+out+"\n" {
		t.Errorf("stderr = %q, want only the note naming %s", r.stderr, out)
	}
	checkGolden(t, filepath.Join(compareData, "report-steady.golden"), []byte(r.stdout))
	rep := readReport(t, out)
	if rep.Breach || rep.Format != fit.CompareFormat || rep.Model != "sonde-oxygen-watch" || len(rep.Terms) != 3 {
		t.Errorf("report: breach %v, format %q, model %q, %d terms; want no breach of sonde-oxygen-watch's 3 terms", rep.Breach, rep.Format, rep.Model, len(rep.Terms))
	}
	want := fit.Tolerance{PracticalShift: 0.4, Level: 0.99, DevianceIncrease: 0.15, Multiplicity: "holm"}
	if got := rep.Tolerance; got.PracticalShift != want.PracticalShift || got.Level != want.Level || got.DevianceIncrease != want.DevianceIncrease || got.Multiplicity != want.Multiplicity {
		t.Errorf("tolerance %+v, want the spec's watch section %+v", got, want)
	}
	if rep.Degradation != nil {
		t.Error("a predictive check without --data")
	}
}

// When the sondes foul, the temperature curve shifts: compare exits 3, the
// report names the term, and the predictive check on the candidate's rows
// breaches too.
func TestCompareFouled(t *testing.T) {
	dir, ref, cand := comparePair(t, fouledCSV)
	r, out := compareRun(t, dir, ref, cand, "--data", fouledCSV, "--quiet")
	r.wantCode(t, exitBreach)
	if r.stderr != "" {
		t.Errorf("a breach with --quiet printed to stderr:\n%s", r.stderr)
	}
	checkGolden(t, filepath.Join(compareData, "report-fouled.golden"), []byte(r.stdout))
	for _, part := range []string{"water_temp  SHIFTED", "BREACH: water_temp shifted", compareCaution} {
		if !strings.Contains(r.stdout, part) {
			t.Errorf("the report lacks %q:\n%s", part, r.stdout)
		}
	}
	rep := readReport(t, out)
	if !rep.Breach || shiftOf(t, rep, "water_temp").Verdict != fit.VerdictShifted {
		t.Errorf("breach %v, water_temp %q; want a breach by water_temp", rep.Breach, shiftOf(t, rep, "water_temp").Verdict)
	}
	for _, name := range []string{"flow", "site"} {
		if v := shiftOf(t, rep, name).Verdict; v == fit.VerdictShifted {
			t.Errorf("%s %s, but only the temperature curve changed", name, v)
		}
	}
	d := rep.Degradation
	if d == nil || !d.Breach || d.Rows != 539 || d.Optimism <= 0 {
		t.Errorf("degradation %+v, want a breach on the 539 fitted rows with an optimism correction", d)
	}
}

// Flags given on the command line override the watch section: with a
// practical margin above the shift, the same change is real but small and
// nothing breaches.
func TestCompareFlagsOverrideWatch(t *testing.T) {
	dir, ref, cand := comparePair(t, fouledCSV)
	r, out := compareRun(t, dir, ref, cand, "--practical-shift", "5", "--level", "0.95", "--multiplicity", "none", "--quiet")
	r.wantCode(t, exitOK)
	rep := readReport(t, out)
	if tol := rep.Tolerance; tol.PracticalShift != 5 || tol.Level != 0.95 || tol.Multiplicity != "none" || tol.DevianceIncrease != 0.15 {
		t.Errorf("tolerance %+v, want the flags' 5, 0.95 and none, and the spec's 0.15", tol)
	}
	if v := shiftOf(t, rep, "water_temp").Verdict; v != fit.VerdictSmall {
		t.Errorf("water_temp %q, want %q", v, fit.VerdictSmall)
	}
	for _, part := range []string{"water_temp  real but small", "outside the 95% simultaneous band and above 5", "no multiplicity adjustment", "within tolerance: nothing breached; real but small changes in water_temp"} {
		if !strings.Contains(r.stdout, part) {
			t.Errorf("the report lacks %q:\n%s", part, r.stdout)
		}
	}
}

// --held-out scores rows neither fit saw, with no optimism; rows that are
// not what the flags say they are are refused with what to do.
func TestCompareHeldOut(t *testing.T) {
	dir, ref, cand := comparePair(t, fouledCSV)
	r, out := compareRun(t, dir, ref, cand, "--data", laterCSV, "--held-out", "--quiet")
	r.wantCode(t, exitBreach)
	if d := readReport(t, out).Degradation; d == nil || d.Optimism != 0 || d.Rows != 269 || !d.Breach {
		t.Errorf("degradation %+v, want a breach on 269 held-out rows with no optimism", d)
	}
	if !strings.Contains(r.stdout, "(held-out rows: no optimism)") {
		t.Errorf("the report does not say the rows were held out:\n%s", r.stdout)
	}
	os.Remove(out)

	r, _ = compareRun(t, dir, ref, cand, "--data", laterCSV)
	r.wantCode(t, exitFailed)
	r.wantStderr(t, laterCSV+": the rows are not the ones the candidate was fitted on", "give --data the CSV file "+cand+" was fitted on, or add --held-out")

	r, _ = compareRun(t, dir, ref, cand, "--data", fouledCSV, "--held-out")
	r.wantCode(t, exitFailed)
	r.wantStderr(t, "exactly the rows", "drop --held-out")
	if _, err := os.Stat(out); err == nil {
		t.Error("a failed comparison wrote its report")
	}
}

// Fits that share rows are refused unless --allow-overlap, which applies
// the engine's correction and says so.
func TestCompareOverlap(t *testing.T) {
	dir := t.TempDir()
	before, err := os.ReadFile(beforeCSV)
	if err != nil {
		t.Fatal(err)
	}
	steady, err := os.ReadFile(steadyCSV)
	if err != nil {
		t.Fatal(err)
	}
	// The second half of before.csv and the first half of after-steady.csv.
	b, s := strings.SplitAfter(string(before), "\n"), strings.SplitAfter(string(steady), "\n")
	mixed := filepath.Join(dir, "mixed.csv")
	os.WriteFile(mixed, []byte(b[0]+strings.Join(b[271:], "")+strings.Join(s[1:271], "")), 0o644)
	ref := fitWindow(t, dir, "before-fit.json", beforeCSV, compareModel)
	cand := fitWindow(t, dir, "mixed-fit.json", mixed, compareModel)

	r, out := compareRun(t, dir, ref, cand)
	r.wantCode(t, exitFailed)
	r.wantStderr(t, "compare: cannot compare candidate "+cand+" with reference "+ref, "share rows", "refit on disjoint windows or pass --allow-overlap")

	r, _ = compareRun(t, dir, ref, cand, "--allow-overlap", "--quiet")
	r.wantCode(t, exitOK)
	if o := readReport(t, out).Overlap; !(o.Shared > 0) || o.Correction == "" {
		t.Errorf("overlap %+v, want a shared fraction and its correction", o)
	}
	if !strings.Contains(r.stdout, "of the rows are shared (allowed)") {
		t.Errorf("the report does not say the rows overlap:\n%s", r.stdout)
	}

	// Fits of the same rows are refused even with --allow-overlap, so the
	// message does not suggest it.
	for _, extra := range [][]string{nil, {"--allow-overlap"}} {
		r, _ = compareRun(t, dir, ref, ref, extra...)
		r.wantCode(t, exitFailed)
		r.wantStderr(t, "the same rows", "refit on disjoint windows")
		if strings.Contains(r.stderr, "pass --allow-overlap") {
			t.Errorf("%v: the message suggests --allow-overlap for fits of the same rows:\n%s", extra, r.stderr)
		}
	}
}

func TestCompareErrors(t *testing.T) {
	dir, ref, steady := comparePair(t, steadyCSV)
	other := fitWindow(t, dir, "other-fit.json", steadyCSV, otherSpecModel)
	noResponse := filepath.Join(dir, "no-response.csv")
	os.WriteFile(noResponse, []byte("site,water_temp,flow\nS05,12,3\n"), 0o644)
	newer := filepath.Join(dir, "newer.json")
	data, err := os.ReadFile(steady)
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile(newer, []byte(strings.Replace(string(data), fit.FormatVersion, "curvewatch-fit/9", 1)), 0o644)
	alarmsStuck := fitWindow(t, dir, "alarms.json", sondeRowsCSV, alarmsModel)
	stuck := filepath.Join(dir, "stuck.json")
	cli(t, "fit", "--data", sondeRowsCSV, "--model", alarmsModel, "--out", stuck, "--max-iterations", "2", "--quiet").wantCode(t, exitFailed)

	out := filepath.Join(dir, "report.json")
	cases := []struct {
		name      string
		ref, cand string
		extra     []string
		wants     []string
	}{
		{"no reference file", filepath.Join(dir, "absent.json"), steady, nil,
			[]string{"compare: fit document " + filepath.Join(dir, "absent.json") + " does not exist; write one with 'curvewatch fit'"}},
		{"not a document", compareModel, steady, nil,
			[]string{"compare: " + compareModel + " is not valid JSON", "curvewatch fit"}},
		{"newer format", ref, newer, nil,
			[]string{newer + ` has format "curvewatch-fit/9", which this curvewatch does not read`}},
		{"different specs", ref, other, nil,
			[]string{"compare: cannot compare candidate " + other + " with reference " + ref + ": ", "refit both windows with the same model spec"}},
		{"unconverged reference", stuck, alarmsStuck, nil,
			[]string{"cannot compare candidate " + alarmsStuck + " with reference " + stuck + ": the reference: ", "--max-iterations"}},
		{"data without the response", ref, steady, []string{"--data", noResponse},
			[]string{noResponse + `: the rows lack the response column "dissolved_oxygen"`}},
		{"no data file", ref, steady, []string{"--data", filepath.Join(dir, "absent.csv")},
			[]string{"compare: cannot read the data", "absent.csv"}},
		// A second --out replaces the first.
		{"output over an input", ref, steady, []string{"--out", steady},
			[]string{steady + " is also an input"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := cli(t, append([]string{"compare", "--reference", c.ref, "--candidate", c.cand, "--out", out}, c.extra...)...)
			r.wantCode(t, exitFailed)
			r.wantStderr(t, c.wants...)
			if r.stdout != "" {
				t.Errorf("an error printed a report:\n%s", r.stdout)
			}
			if _, err := os.Stat(out); err == nil {
				t.Error("a failed comparison wrote its report")
			}
		})
	}
}

func TestCompareUsageErrors(t *testing.T) {
	dir := t.TempDir()
	a, b, out := filepath.Join(dir, "a.json"), filepath.Join(dir, "b.json"), filepath.Join(dir, "r.json")
	base := []string{"--reference", a, "--candidate", b, "--out", out}
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"unknown flag", append(base, "--threshold", "2"), "compare: unknown flag --threshold"},
		{"no reference", []string{"--candidate", b, "--out", out}, "compare: --reference is required"},
		{"no out", []string{"--reference", a, "--candidate", b}, "compare: --out is required"},
		{"level out of range", append(base, "--level", "99"), "--level must be between 0 and 1"},
		{"negative shift", append(base, "--practical-shift", "-1"), "--practical-shift must be 0 or more"},
		{"zero deviance increase", append(base, "--data", "x.csv", "--deviance-increase", "0"), "--deviance-increase must be above 0"},
		{"unknown multiplicity", append(base, "--multiplicity", "bonferroni"), `--multiplicity must be holm or none, not "bonferroni"`},
		{"held out without data", append(base, "--held-out"), "--held-out says how to read the rows of --data"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := cli(t, append([]string{"compare"}, c.args...)...)
			r.wantCode(t, exitUsage)
			r.wantStderr(t, c.want, "Run 'curvewatch compare --help'")
		})
	}
}

package main

import (
	"encoding/csv"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// readCSV reads a whole CSV file the way predict reads its input.
func readCSV(t *testing.T, path string) [][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.TrimLeadingSpace = true
	recs, err := r.ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return recs
}

// predictFrom runs predict with the fit document docPath on data.
func predictFrom(t *testing.T, docPath, data string, extra ...string) (result, string) {
	t.Helper()
	out := filepath.Join(t.TempDir(), "pred.csv")
	args := append([]string{"predict", "--fit", docPath, "--data", data, "--out", out, "--quiet"}, extra...)
	return cli(t, args...), out
}

// checkPredictions checks the output of predict against its input: every
// input column as it was, then link, link_se and response, with response
// equal to the inverse link of link (within tol, relative) and empty cells
// exactly on the rows that lack a covariate (named by line in emptyLines).
func checkPredictions(t *testing.T, in, out string, inverse func(float64) float64, tol float64, emptyLines []int) {
	t.Helper()
	input, output := readCSV(t, in), readCSV(t, out)
	if want := append(slices.Clone(input[0]), "link", "link_se", "response"); !slices.Equal(output[0], want) {
		t.Fatalf("output header %v, want %v", output[0], want)
	}
	if len(output) != len(input) {
		t.Fatalf("%d output records, want %d", len(output), len(input))
	}
	var empty []int
	for i := 1; i < len(input); i++ {
		got, width := output[i], len(input[i])
		if !slices.Equal(got[:width], input[i]) {
			t.Fatalf("record %d: input columns %q, want %q", i+1, got[:width], input[i])
		}
		cells := got[width:]
		if cells[0] == "" || cells[1] == "" || cells[2] == "" {
			if cells[0] != "" || cells[1] != "" || cells[2] != "" {
				t.Errorf("record %d: prediction cells %q, want all three empty or all set", i+1, cells)
			}
			empty = append(empty, i+1) // no quoted line breaks: record i+1 is line i+1
			continue
		}
		var v [3]float64
		for k, c := range cells {
			x, err := strconv.ParseFloat(c, 64)
			if err != nil {
				t.Fatalf("record %d: %v", i+1, err)
			}
			v[k] = x
		}
		link, se, resp := v[0], v[1], v[2]
		if want := inverse(link); math.Abs(resp-want) > tol*math.Abs(want) {
			t.Errorf("record %d: response %v, want the inverse link of %v = %v", i+1, resp, link, want)
		}
		if !(se > 0) {
			t.Errorf("record %d: link_se %v, want positive", i+1, se)
		}
	}
	if emptyLines != nil && !slices.Equal(empty, emptyLines) {
		t.Errorf("rows with empty predictions on lines %v, want %v", empty, emptyLines)
	}
}

func TestPredict(t *testing.T) {
	identity := func(x float64) float64 { return x }
	cases := []struct {
		name, model string
		inverse     func(float64) float64
		tol         float64
	}{
		{"river-sonde", sondeModel, identity, 0},
		// common practice (no source): the log link's inverse is exp; the
		// engine and the test may round exp differently in the last bit.
		{"alarm-counts", alarmsModel, math.Exp, 1e-14},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			fr, doc := fitTo(t, c.model)
			fr.wantCode(t, exitOK)
			r, out := predictFrom(t, doc, sondeNewCSV)
			r.wantCode(t, exitOK)
			// new.csv lacks flow on line 5 and water_temp on line 7.
			checkPredictions(t, sondeNewCSV, out, c.inverse, c.tol, []int{5, 7})
			checkGolden(t, filepath.Join(cliData, c.name, "predict.golden"), []byte(r.stdout))
		})
	}
}

// Predicting on the fitted rows themselves, and on a long file whose
// notes hold commas, quotes and line breaks, keeps every row in step with
// its prediction across the engine's blocks.
func TestPredictLongFileInStep(t *testing.T) {
	fr, doc := fitTo(t, sondeModel)
	fr.wantCode(t, exitOK)

	r, out := predictFrom(t, doc, sondeRowsCSV)
	r.wantCode(t, exitOK)
	checkPredictions(t, sondeRowsCSV, out, func(x float64) float64 { return x }, 0, []int{38, 152, 223})

	// 10,000 rows (more than two of the CSV reader's blocks), every 7th
	// with a note spanning two lines, so record and line numbers part.
	long := filepath.Join(t.TempDir(), "long.csv")
	var b strings.Builder
	b.WriteString("site,water_temp,flow,note\n")
	for i := range 10_000 {
		note := ""
		if i%7 == 0 {
			note = fmt.Sprintf("\"reading %d, checked\nby \"\"hand\"\"\"", i)
		}
		fmt.Fprintf(&b, "S0%d,%.2f,%.2f,%s\n", 5+2*(i%3), 2+float64(i%2300)/100, 3+float64(i%97)/10, note)
	}
	if err := os.WriteFile(long, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	r, out = predictFrom(t, doc, long)
	r.wantCode(t, exitOK)
	input, output := readCSV(t, long), readCSV(t, out)
	if len(output) != len(input) {
		t.Fatalf("%d output records, want %d", len(output), len(input))
	}
	for i := range input {
		if !slices.Equal(output[i][:4], input[i]) {
			t.Fatalf("record %d: %q, want %q", i+1, output[i][:4], input[i])
		}
		if i > 0 && output[i][4] != output[i][6] {
			t.Fatalf("record %d: link %s and response %s differ under the identity link", i+1, output[i][4], output[i][6])
		}
	}
	if !strings.Contains(r.stdout, "predicted    10,000") {
		t.Errorf("the report does not count 10000 rows:\n%s", r.stdout)
	}
}

func TestPredictUnseenLevel(t *testing.T) {
	fr, doc := fitTo(t, sondeModel)
	fr.wantCode(t, exitOK)
	r, out := predictFrom(t, doc, unseenCSV)
	r.wantCode(t, exitFailed)
	r.wantStderr(t, unseenCSV+` line 4, column "site": level "S11"`, `"S05", "S07", "S09"`)
	if _, err := os.Stat(out); err == nil {
		t.Error("a failed prediction wrote its output")
	}
	if left, _ := filepath.Glob(filepath.Join(filepath.Dir(out), ".*")); len(left) > 0 {
		t.Errorf("temporary files left behind: %v", left)
	}
}

func TestPredictRefusesUnconverged(t *testing.T) {
	fr, doc := fitTo(t, alarmsModel, "--max-iterations", "2")
	fr.wantCode(t, exitFailed)

	r, out := predictFrom(t, doc, sondeNewCSV)
	r.wantCode(t, exitFailed)
	r.wantStderr(t, doc+` holds a fit of model "sonde-alarms" that did not converge`, "--allow-unconverged")
	if _, err := os.Stat(out); err == nil {
		t.Error("a refused prediction wrote its output")
	}

	r, _ = predictFrom(t, doc, sondeNewCSV, "--allow-unconverged")
	r.wantCode(t, exitOK)
	if !strings.Contains(r.stdout, "CAUTION") {
		t.Errorf("the report does not warn that the fit did not converge:\n%s", r.stdout)
	}
}

func TestPredictErrors(t *testing.T) {
	fr, doc := fitTo(t, sondeModel)
	fr.wantCode(t, exitOK)
	dir := t.TempDir()
	noFlow := filepath.Join(dir, "no-flow.csv")
	clash := filepath.Join(dir, "clash.csv")
	os.WriteFile(noFlow, []byte("site,water_temp\nS05,12\n"), 0o644)
	os.WriteFile(clash, []byte("site,water_temp,flow,link\nS05,12,3,x\n"), 0o644)

	cases := []struct {
		name  string
		args  []string
		code  int
		wants []string
	}{
		{"no fit flag", []string{"--data", sondeNewCSV, "--out", filepath.Join(dir, "p.csv")}, exitUsage,
			[]string{"predict: --fit is required: the fit document (JSON) written by 'curvewatch fit'"}},
		{"no data flag", []string{"--fit", doc, "--out", filepath.Join(dir, "p.csv")}, exitUsage,
			[]string{"predict: --data is required"}},
		{"missing column", []string{"--fit", doc, "--data", noFlow, "--out", filepath.Join(dir, "p.csv")}, exitFailed,
			[]string{noFlow + ` lacks the column(s) "flow" that model "sonde-oxygen" needs`}},
		{"column clash", []string{"--fit", doc, "--data", clash, "--out", filepath.Join(dir, "p.csv")}, exitFailed,
			[]string{clash + ` already has a column named "link"`}},
		{"not a document", []string{"--fit", sondeModel, "--data", sondeNewCSV, "--out", filepath.Join(dir, "p.csv")}, exitFailed,
			[]string{sondeModel + " is not valid JSON", "curvewatch fit"}},
		{"no document", []string{"--fit", filepath.Join(dir, "absent.json"), "--data", sondeNewCSV, "--out", filepath.Join(dir, "p.csv")}, exitFailed,
			[]string{"absent.json does not exist; write one with 'curvewatch fit'"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := cli(t, append([]string{"predict"}, c.args...)...)
			r.wantCode(t, c.code)
			r.wantStderr(t, c.wants...)
		})
	}
}

// A file as spreadsheets save it (a byte-order mark, CRLF line ends, no
// final line end) reads the same as the plain one.
func TestPredictSpreadsheetFile(t *testing.T) {
	fr, doc := fitTo(t, sondeModel)
	fr.wantCode(t, exitOK)
	plain, err := os.ReadFile(sondeNewCSV)
	if err != nil {
		t.Fatal(err)
	}
	excel := "\uFEFF" + strings.TrimSuffix(strings.ReplaceAll(string(plain), "\n", "\r\n"), "\r\n")
	path := filepath.Join(t.TempDir(), "excel.csv")
	if err := os.WriteFile(path, []byte(excel), 0o644); err != nil {
		t.Fatal(err)
	}
	r1, out1 := predictFrom(t, doc, sondeNewCSV)
	r1.wantCode(t, exitOK)
	r2, out2 := predictFrom(t, doc, path)
	r2.wantCode(t, exitOK)
	a, b := readCSV(t, out1), readCSV(t, out2)
	if !slices.EqualFunc(a, b, slices.Equal) {
		t.Errorf("predictions differ between the plain and the spreadsheet file:\n%q\n%q", a, b)
	}
}

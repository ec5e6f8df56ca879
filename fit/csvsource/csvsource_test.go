package csvsource_test

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

// fixtures is the folder of CSV test inputs, one folder per case.
const fixtures = "../../testdata/csv"

var nan = math.NaN()

// result is everything a scan delivered, copied out of the reused blocks.
type result struct {
	Blocks  []int // rows in each block, in order
	Line    []int64
	Numeric map[string][]float64
	Text    map[string][]string
}

// collect scans src and copies out what it delivers.
func collect(src fit.Source, need fit.Need) (result, error) {
	r := result{Numeric: map[string][]float64{}, Text: map[string][]string{}}
	err := src.Scan(context.Background(), need, func(b *fit.Block) error {
		r.Blocks = append(r.Blocks, b.Rows)
		r.Line = append(r.Line, b.Line...)
		for name, v := range b.Numeric {
			r.Numeric[name] = append(r.Numeric[name], v...)
		}
		for name, v := range b.Text {
			r.Text[name] = append(r.Text[name], v...)
		}
		return nil
	})
	return r, err
}

// diff describes how got differs from want, or returns "". Numbers are
// equal if they are equal or both NaN; Blocks is compared only if want
// sets it.
func diff(got, want result) string {
	var out []string
	if want.Blocks != nil && !slices.Equal(got.Blocks, want.Blocks) {
		out = append(out, fmt.Sprintf("blocks %v, want %v", got.Blocks, want.Blocks))
	}
	if !slices.Equal(got.Line, want.Line) {
		out = append(out, fmt.Sprintf("lines %v, want %v", got.Line, want.Line))
	}
	sameFloat := func(x, y float64) bool { return x == y || math.IsNaN(x) && math.IsNaN(y) }
	for name, w := range want.Numeric {
		if g := got.Numeric[name]; !slices.EqualFunc(g, w, sameFloat) {
			out = append(out, fmt.Sprintf("numeric %q = %v, want %v", name, g, w))
		}
	}
	for name, w := range want.Text {
		if g := got.Text[name]; !slices.Equal(g, w) {
			out = append(out, fmt.Sprintf("text %q = %q, want %q", name, g, w))
		}
	}
	for name := range got.Numeric {
		if _, ok := want.Numeric[name]; !ok {
			out = append(out, fmt.Sprintf("unexpected numeric column %q", name))
		}
	}
	for name := range got.Text {
		if _, ok := want.Text[name]; !ok {
			out = append(out, fmt.Sprintf("unexpected text column %q", name))
		}
	}
	return strings.Join(out, "\n")
}

// openFixture opens testdata/csv/<name>/input.csv under the name
// <name>.csv, so that error messages do not depend on the path.
func openFixture(name string) (*csvsource.File, error) {
	path := filepath.Join(fixtures, name, "input.csv")
	return csvsource.New(name+".csv", func() (io.ReadCloser, error) { return os.Open(path) })
}

// fromString returns a File over the text s.
func fromString(t testing.TB, s string) (*csvsource.File, error) {
	t.Helper()
	return csvsource.New("rows.csv", func() (io.ReadCloser, error) {
		return io.NopCloser(strings.NewReader(s)), nil
	})
}

func TestFixtures(t *testing.T) {
	tests := []struct {
		name string
		need fit.Need
		want result
		// err is the whole error message, from New or Scan; line and
		// column are the *Error's fields.
		err    string
		line   int64
		column string
	}{{
		name: "basic",
		need: fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"site"}},
		want: result{
			Blocks:  []int{10},
			Line:    []int64{2, 3, 4, 5, 6, 7, 8, 9, 10, 11},
			Numeric: map[string][]float64{"time": {1, 2, 3, 4, 5, 6, 7, 8, 9, 10}, "flow": {1.5, 3, 4.5, 6, 7.5, 9, 10.5, 12, 13.5, 15}},
			Text:    map[string][]string{"site": {"b", "a", "b", "a", "b", "a", "b", "a", "b", "a"}},
		},
	}, {
		name: "bom",
		need: fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"site"}},
		want: result{
			Line:    []int64{2, 3},
			Numeric: map[string][]float64{"time": {1, 2}, "flow": {2.5, 3}},
			Text:    map[string][]string{"site": {"a", "b"}},
		},
	}, {
		name: "crlf",
		need: fit.Need{Numeric: []string{"flow"}, Text: []string{"note"}},
		want: result{
			Line:    []int64{2, 3, 5},
			Numeric: map[string][]float64{"flow": {2, 3, 4}},
			Text:    map[string][]string{"note": {"x", "two\nlines", "z"}},
		},
	}, {
		name: "quoted-newlines",
		need: fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"note"}},
		want: result{
			Line:    []int64{2, 3, 6, 8},
			Numeric: map[string][]float64{"time": {1, 2, 3, 4}, "flow": {10, 20, 30, 40}},
			Text:    map[string][]string{"note": {"plain", "first\nsecond\nthird", `say "hi"`, "a, b"}},
		},
	}, {
		name: "missing-tokens",
		need: fit.Need{Numeric: []string{"x"}, Text: []string{"x"}},
		want: result{
			Line:    []int64{2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13},
			Numeric: map[string][]float64{"x": {nan, nan, nan, nan, nan, nan, nan, nan, nan, nan, 4.5, 0}},
			Text:    map[string][]string{"x": {"", "NA", "n/a", "NaN", "null", "NULL", "Inf", "-inf", "+Infinity", "", "4.5", "1e-400"}},
		},
	}, {
		name: "header-only",
		need: fit.Need{Numeric: []string{"flow"}, Text: []string{"site"}},
		want: result{},
	}, {
		name:   "bad-number",
		need:   fit.Need{Numeric: []string{"time", "flow"}},
		err:    `bad-number.csv line 17, column "flow": "abc" is not a number (leave the cell empty or write NA for a missing value)`,
		line:   17,
		column: "flow",
	}, {
		// A bad cell in a column the scan does not read is no error.
		name: "bad-number",
		need: fit.Need{Numeric: []string{"time"}},
		want: result{
			Line:    []int64{2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17, 18},
			Numeric: map[string][]float64{"time": {1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17}},
		},
	}, {
		name:   "decimal-comma",
		need:   fit.Need{Numeric: []string{"flow"}},
		err:    `decimal-comma.csv line 2, column "flow": "1,5" is not a number: write the decimal point as '.' and leave out thousands separators (1234.5, not 1234,5 or 1,234.5)`,
		line:   2,
		column: "flow",
	}, {
		name:   "too-large",
		need:   fit.Need{Numeric: []string{"flow"}},
		err:    `too-large.csv line 2, column "flow": "1e400" is too large for a number (the largest is about 1.8e308)`,
		line:   2,
		column: "flow",
	}, {
		name: "ragged",
		need: fit.Need{Numeric: []string{"time"}},
		err:  `ragged.csv line 3: 2 fields, but the header has 3 columns`,
		line: 3,
	}, {
		name: "ragged-long",
		need: fit.Need{Numeric: []string{"time"}},
		err:  `ragged-long.csv line 3: 3 fields, but the header has 2 columns (enclose in quotes a value that contains a comma)`,
		line: 3,
	}, {
		name: "empty",
		err:  `empty.csv: the file is empty; its first line must name the columns, like time,flow,site`,
	}, {
		name: "duplicate-header",
		err:  `duplicate-header.csv line 1: column 3 has no name; columns 2 and 5 are both named "flow"; columns 1 and 6 are both named "time" (every column needs a name of its own)`,
		line: 1,
	}, {
		name: "semicolon",
		err:  `semicolon.csv line 1: looks like a semicolon-separated file; curvewatch reads comma-separated CSV`,
		line: 1,
	}, {
		name: "no-header",
		err:  `no-header.csv line 1: the first line looks like data, not a header; the first line must name the columns, like time,flow,site`,
		line: 1,
	}, {
		name: "unclosed-quote",
		need: fit.Need{Text: []string{"note"}},
		err:  `unclosed-quote.csv line 3: extraneous or missing " in quoted-field (a quoted value that starts on this line runs to line 5, byte 5: is its closing quote missing?)`,
		line: 3,
	}, {
		name: "bare-quote",
		need: fit.Need{Text: []string{"note"}},
		err:  `bare-quote.csv line 2: bare " in non-quoted-field at byte 5 (write a quote inside a value as "" and enclose the whole value in quotes)`,
		line: 2,
	}}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			f, err := openFixture(tt.name)
			var got result
			if err == nil {
				got, err = collect(f, tt.need)
			}
			if tt.err != "" {
				if err == nil {
					t.Fatalf("no error, want %s", tt.err)
				}
				if err.Error() != tt.err {
					t.Errorf("error\n got: %s\nwant: %s", err, tt.err)
				}
				var e *csvsource.Error
				if !errors.As(err, &e) {
					t.Fatalf("error %T is not a *csvsource.Error", err)
				}
				if e.Line != tt.line || e.Column != tt.column {
					t.Errorf("error at line %d column %q, want line %d column %q", e.Line, e.Column, tt.line, tt.column)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if d := diff(got, tt.want); d != "" {
				t.Error(d)
			}
		})
	}
}

func TestScanStrings(t *testing.T) {
	tests := []struct {
		name string
		in   string
		need fit.Need
		want result
		err  string
	}{{
		name: "spaces around values",
		in:   "a,b,c\n 1 ,  x y  ,\t2\t\n",
		need: fit.Need{Numeric: []string{"a", "c"}, Text: []string{"b"}},
		want: result{Line: []int64{2}, Numeric: map[string][]float64{"a": {1}, "c": {2}}, Text: map[string][]string{"b": {"x y"}}},
	}, {
		name: "space before a quoted value",
		in:   "a,b\n1, \"x, y\"\n",
		need: fit.Need{Text: []string{"b"}},
		want: result{Line: []int64{2}, Text: map[string][]string{"b": {"x, y"}}},
	}, {
		name: "empty text is missing, NA is a level",
		in:   "a,b\n1,\n2,NA\n3,\"\"\n",
		need: fit.Need{Text: []string{"b"}},
		want: result{Line: []int64{2, 3, 4}, Text: map[string][]string{"b": {"", "NA", ""}}},
	}, {
		name: "empty lines are skipped",
		in:   "a\n\n1\n\n\n2\n",
		need: fit.Need{Numeric: []string{"a"}},
		want: result{Line: []int64{3, 6}, Numeric: map[string][]float64{"a": {1, 2}}},
	}, {
		name: "number forms",
		in:   "a\n-0.5\n+3\n.25\n7.\n1.5E3\n1e-3\n",
		need: fit.Need{Numeric: []string{"a"}},
		want: result{Line: []int64{2, 3, 4, 5, 6, 7}, Numeric: map[string][]float64{"a": {-0.5, 3, 0.25, 7, 1500, 0.001}}},
	}, {
		name: "a column asked for twice, and as both kinds",
		in:   "a\n1\n",
		need: fit.Need{Numeric: []string{"a", "a"}, Text: []string{"a"}},
		want: result{Line: []int64{2}, Numeric: map[string][]float64{"a": {1}}, Text: map[string][]string{"a": {"1"}}},
	}, {
		name: "no columns asked for",
		in:   "a,b\n1,2\nx,y\n",
		want: result{Blocks: []int{2}, Line: []int64{2, 3}},
	}, {
		name: "hex and underscores are not numbers",
		in:   "a\n0x1p3\n",
		need: fit.Need{Numeric: []string{"a"}},
		err:  `rows.csv line 2, column "a": "0x1p3" is not a number (leave the cell empty or write NA for a missing value)`,
	}, {
		name: "thousands separator",
		in:   "a\n\"1,234.5\"\n",
		need: fit.Need{Numeric: []string{"a"}},
		err:  `rows.csv line 2, column "a": "1,234.5" is not a number: write the decimal point as '.' and leave out thousands separators (1234.5, not 1234,5 or 1,234.5)`,
	}, {
		name: "bad cell on a later line of its row",
		in:   "note,x\n\"two\nlines\",oops\n",
		need: fit.Need{Numeric: []string{"x"}},
		err:  `rows.csv line 3, column "x": "oops" is not a number (leave the cell empty or write NA for a missing value)`,
	}, {
		name: "long bad cell is shortened",
		in:   "a\n" + strings.Repeat("é", 30) + "\n",
		need: fit.Need{Numeric: []string{"a"}},
		err:  `rows.csv line 2, column "a": "` + strings.Repeat("é", 20) + `"… is not a number (leave the cell empty or write NA for a missing value)`,
	}, {
		name: "missing column",
		in:   "time,Flow,site\n",
		need: fit.Need{Numeric: []string{"time", "flow"}},
		err:  `rows.csv: no column "flow" (did you mean "Flow" for "flow"?); the header has "time", "Flow", "site"`,
	}, {
		name: "missing columns",
		in:   "time,flow\n",
		need: fit.Need{Numeric: []string{"temp", "time"}, Text: []string{"site", "temp"}},
		err:  `rows.csv: no columns "temp", "site"; the header has "time", "flow"`,
	}, {
		name: "tab-separated",
		in:   "time\tflow\n1\t2\n",
		err:  `rows.csv line 1: looks like a tab-separated file; curvewatch reads comma-separated CSV`,
	}, {
		name: "UTF-16",
		in:   "\xff\xfet\x00,\x00",
		err:  `rows.csv: looks like UTF-16 text; curvewatch reads UTF-8 CSV (save the file as UTF-8)`,
	}, {
		name: "three columns share a name",
		in:   "a,a,b,a\n",
		err:  `rows.csv line 1: columns 1, 2 and 4 are all named "a" (every column needs a name of its own)`,
	}, {
		name: "two unnamed columns",
		in:   "a, ,\"\"\n",
		err:  `rows.csv line 1: columns 2 and 3 have no name (every column needs a name of its own)`,
	}, {
		name: "header after empty lines",
		in:   "\n\nflow\n1\n",
		need: fit.Need{Numeric: []string{"flow"}},
		want: result{Line: []int64{4}, Numeric: map[string][]float64{"flow": {1}}},
	}, {
		name: "only empty lines",
		in:   "\n\r\n\n",
		err:  `rows.csv: the file is empty; its first line must name the columns, like time,flow,site`,
	}}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			f, err := fromString(t, tt.in)
			var got result
			if err == nil {
				got, err = collect(f, tt.need)
			}
			if tt.err != "" {
				if err == nil || err.Error() != tt.err {
					t.Fatalf("error\n got: %v\nwant: %s", err, tt.err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if d := diff(got, tt.want); d != "" {
				t.Error(d)
			}
		})
	}
}

func TestBlockBoundaries(t *testing.T) {
	need := fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"site"}}
	f, err := openFixture("basic")
	if err != nil {
		t.Fatal(err)
	}
	whole, err := collect(f, need)
	if err != nil {
		t.Fatal(err)
	}
	for _, tt := range []struct {
		blockRows int
		blocks    []int
	}{
		{blockRows: 1, blocks: []int{1, 1, 1, 1, 1, 1, 1, 1, 1, 1}},
		{blockRows: 3, blocks: []int{3, 3, 3, 1}},
		{blockRows: 5, blocks: []int{5, 5}},
		{blockRows: 9, blocks: []int{9, 1}},
		{blockRows: 10, blocks: []int{10}},
		{blockRows: 11, blocks: []int{10}},
		{blockRows: 0, blocks: []int{10}},
		{blockRows: -1, blocks: []int{10}},
	} {
		t.Run(fmt.Sprint(tt.blockRows), func(t *testing.T) {
			f.BlockRows = tt.blockRows
			got, err := collect(f, need)
			if err != nil {
				t.Fatal(err)
			}
			want := whole
			want.Blocks = tt.blocks
			if d := diff(got, want); d != "" {
				t.Error(d)
			}
		})
	}
}

// TestBlockShape checks what fn sees in each block, not only what a
// caller can piece together from them.
func TestBlockShape(t *testing.T) {
	f, err := openFixture("basic")
	if err != nil {
		t.Fatal(err)
	}
	f.BlockRows = 3
	need := fit.Need{Numeric: []string{"flow"}, Text: []string{"site"}}
	var first *fit.Block
	err = f.Scan(context.Background(), need, func(b *fit.Block) error {
		if first == nil {
			first = b
		} else if b != first {
			t.Errorf("a new block for each call; want one reused")
		}
		if len(b.Line) != b.Rows || len(b.Numeric["flow"]) != b.Rows || len(b.Text["site"]) != b.Rows {
			t.Errorf("Rows %d, but %d lines, %d flows, %d sites",
				b.Rows, len(b.Line), len(b.Numeric["flow"]), len(b.Text["site"]))
		}
		if len(b.Numeric) != 1 || len(b.Text) != 1 {
			t.Errorf("columns %v %v, want only flow and site", b.Numeric, b.Text)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}

func TestScanTwice(t *testing.T) {
	for _, tt := range []struct {
		name string
		need fit.Need
	}{
		{"basic", fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"site", "flow"}}},
		{"quoted-newlines", fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"note"}}},
		{"missing-tokens", fit.Need{Numeric: []string{"id", "x"}, Text: []string{"x"}}},
		{"crlf", fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"note"}}},
	} {
		t.Run(tt.name, func(t *testing.T) {
			f, err := openFixture(tt.name)
			if err != nil {
				t.Fatal(err)
			}
			f.BlockRows = 2
			first, err := collect(f, tt.need)
			if err != nil {
				t.Fatal(err)
			}
			if len(first.Line) == 0 {
				t.Fatal("no rows")
			}
			second, err := collect(f, tt.need)
			if err != nil {
				t.Fatal(err)
			}
			if d := diff(second, first); d != "" {
				t.Errorf("second scan differs from the first:\n%s", d)
			}
		})
	}
}

func TestOpen(t *testing.T) {
	path := filepath.Join(fixtures, "bom", "input.csv")
	f, err := csvsource.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	if got, want := f.Columns(), []string{"time", "flow", "site"}; !slices.Equal(got, want) {
		t.Errorf("Columns() = %q, want %q", got, want)
	}
	if f.Name() != path {
		t.Errorf("Name() = %q, want %q", f.Name(), path)
	}
	if f.BlockRows != csvsource.DefaultBlockRows {
		t.Errorf("BlockRows = %d, want %d", f.BlockRows, csvsource.DefaultBlockRows)
	}
	f.Columns()[0] = "changed"
	if f.Columns()[0] != "time" {
		t.Error("changing what Columns returned changed the File")
	}

	_, err = csvsource.Open(filepath.Join(t.TempDir(), "absent.csv"))
	if !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("Open(absent) error %v, want fs.ErrNotExist", err)
	}

	// A file removed after Open fails at Scan, with the error from os.Open.
	tmp := filepath.Join(t.TempDir(), "gone.csv")
	if err := os.WriteFile(tmp, []byte("a\n1\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	f, err = csvsource.Open(tmp)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(tmp); err != nil {
		t.Fatal(err)
	}
	if _, err := collect(f, fit.Need{Numeric: []string{"a"}}); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("Scan of a removed file: error %v, want fs.ErrNotExist", err)
	}
}

// source is an open function over a sequence of contents, one per call
// (the last repeats), that counts opens and closes.
type source struct {
	contents []string
	opens    int
	closes   int
	readErr  error // returned by Read after the contents, instead of io.EOF
}

func (s *source) open() (io.ReadCloser, error) {
	c := s.contents[min(s.opens, len(s.contents)-1)]
	s.opens++
	var r io.Reader = strings.NewReader(c)
	if s.readErr != nil {
		r = io.MultiReader(r, errReader{s.readErr})
	}
	return readCloser{r, func() error { s.closes++; return nil }}, nil
}

type readCloser struct {
	io.Reader
	close func() error
}

func (rc readCloser) Close() error { return rc.close() }

type errReader struct{ err error }

func (r errReader) Read([]byte) (int, error) { return 0, r.err }

func TestOpensAndCloses(t *testing.T) {
	s := &source{contents: []string{"a,b\n1,2\n3,x\n"}}
	f, err := csvsource.New("rows.csv", s.open)
	if err != nil {
		t.Fatal(err)
	}
	if s.opens != 1 || s.closes != 1 {
		t.Errorf("New: %d opens, %d closes; want 1, 1", s.opens, s.closes)
	}
	if _, err := collect(f, fit.Need{Numeric: []string{"a"}}); err != nil {
		t.Fatal(err)
	}
	if _, err := collect(f, fit.Need{Numeric: []string{"b"}}); err == nil {
		t.Fatal("no error for x in b")
	}
	if _, err := collect(f, fit.Need{Numeric: []string{"absent"}}); err == nil {
		t.Fatal("no error for a missing column")
	}
	// The missing column is caught before opening.
	if s.opens != 3 || s.closes != 3 {
		t.Errorf("after 3 scans: %d opens, %d closes; want 3, 3", s.opens, s.closes)
	}

	openErr := errors.New("no such bucket")
	_, err = csvsource.New("rows.csv", func() (io.ReadCloser, error) { return nil, openErr })
	if !errors.Is(err, openErr) {
		t.Errorf("New with a failing open: error %v, want %v", err, openErr)
	}
}

func TestReadError(t *testing.T) {
	readErr := errors.New("connection reset")
	s := &source{contents: []string{"a\n1\n2\n"}, readErr: readErr}
	f, err := csvsource.New("rows.csv", s.open)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := collect(f, fit.Need{Numeric: []string{"a"}}); !errors.Is(err, readErr) {
		t.Errorf("error %v, want %v", err, readErr)
	}
}

func TestHeaderChanged(t *testing.T) {
	s := &source{contents: []string{"a,b\n1,2\n", "a,c\n1,2\n"}}
	f, err := csvsource.New("rows.csv", s.open)
	if err != nil {
		t.Fatal(err)
	}
	_, err = collect(f, fit.Need{Numeric: []string{"a"}})
	const want = `rows.csv: the header changed since the file was opened (was a,b, now a,c)`
	if err == nil || err.Error() != want {
		t.Errorf("error %v, want %s", err, want)
	}
}

func TestStopEarly(t *testing.T) {
	f, err := openFixture("basic")
	if err != nil {
		t.Fatal(err)
	}
	f.BlockRows = 3
	need := fit.Need{Numeric: []string{"flow"}}

	t.Run("fn error", func(t *testing.T) {
		stop := errors.New("stop")
		calls := 0
		err := f.Scan(context.Background(), need, func(*fit.Block) error { calls++; return stop })
		if err != stop || calls != 1 {
			t.Errorf("error %v after %d calls, want %v after 1", err, calls, stop)
		}
	})
	t.Run("cancel in fn", func(t *testing.T) {
		ctx, cancel := context.WithCancel(context.Background())
		defer cancel()
		calls := 0
		err := f.Scan(ctx, need, func(*fit.Block) error { calls++; cancel(); return nil })
		if !errors.Is(err, context.Canceled) || calls != 1 {
			t.Errorf("error %v after %d calls, want %v after 1", err, calls, context.Canceled)
		}
	})
	t.Run("canceled before", func(t *testing.T) {
		ctx, cancel := context.WithCancel(context.Background())
		cancel()
		err := f.Scan(ctx, need, func(*fit.Block) error { t.Error("fn called"); return nil })
		if !errors.Is(err, context.Canceled) {
			t.Errorf("error %v, want %v", err, context.Canceled)
		}
	})
}

// TestAllocations checks that a scan allocates per row only what
// encoding/csv does (one string per record), not per cell.
func TestAllocations(t *testing.T) {
	const rows = 1000
	var b bytes.Buffer
	b.WriteString("a,b,c,d,e\n")
	for i := range rows {
		fmt.Fprintf(&b, "%d,%d.5,NA,,site%d\n", i, i, i%3)
	}
	data := b.Bytes()
	f, err := csvsource.New("rows.csv", func() (io.ReadCloser, error) {
		return io.NopCloser(bytes.NewReader(data)), nil
	})
	if err != nil {
		t.Fatal(err)
	}
	f.BlockRows = 100
	need := fit.Need{Numeric: []string{"a", "b", "c", "d"}, Text: []string{"e"}}
	allocs := testing.AllocsPerRun(5, func() {
		if err := f.Scan(context.Background(), need, func(*fit.Block) error { return nil }); err != nil {
			t.Fatal(err)
		}
	})
	// One string per record, plus a fixed number for buffers and the block.
	if limit := float64(rows + 100); allocs > limit {
		t.Errorf("%v allocations for %d rows, want at most %v", allocs, rows, limit)
	}
}

func TestConcurrentScans(t *testing.T) {
	f, err := openFixture("quoted-newlines")
	if err != nil {
		t.Fatal(err)
	}
	f.BlockRows = 2
	need := fit.Need{Numeric: []string{"time", "flow"}, Text: []string{"note"}}
	want, err := collect(f, need)
	if err != nil {
		t.Fatal(err)
	}
	results := make(chan result, 4)
	errs := make(chan error, 4)
	for range 4 {
		go func() {
			r, err := collect(f, need)
			results <- r
			errs <- err
		}()
	}
	for range 4 {
		if err := <-errs; err != nil {
			t.Error(err)
		}
		if d := diff(<-results, want); d != "" {
			t.Error(d)
		}
	}
}

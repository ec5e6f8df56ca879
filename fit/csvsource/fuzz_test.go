package csvsource_test

import (
	"bytes"
	"context"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/curvewatch/curvewatch/fit"
	"github.com/curvewatch/curvewatch/fit/csvsource"
)

// FuzzScan feeds arbitrary bytes to New and Scan. Whatever the input, they
// must not panic, and a scan either fails with an *Error or delivers blocks
// that hold exactly Rows values for every column asked for, with Line
// increasing, and the same rows when scanned again in blocks of another
// size. numeric chooses which
// columns are asked for as numbers (bit i%16 for column i); the rest are
// asked for as text.
func FuzzScan(f *testing.F) {
	inputs, err := filepath.Glob(filepath.Join(fixtures, "*", "input.csv"))
	if err != nil {
		f.Fatal(err)
	}
	if len(inputs) == 0 {
		f.Fatalf("no seed inputs in %s", fixtures)
	}
	for _, path := range inputs {
		data, err := os.ReadFile(path)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data, uint8(3), uint16(0xffff))
		f.Add(data, uint8(1), uint16(0x0001))
	}
	f.Fuzz(func(t *testing.T, data []byte, blockRows uint8, numeric uint16) {
		src, err := csvsource.New("fuzz.csv", func() (io.ReadCloser, error) {
			return io.NopCloser(bytes.NewReader(data)), nil
		})
		if err != nil {
			requireDataError(t, err)
			return
		}
		src.BlockRows = int(blockRows)
		var need fit.Need
		for i, name := range src.Columns() {
			if numeric&(1<<(i%16)) != 0 {
				need.Numeric = append(need.Numeric, name)
			} else {
				need.Text = append(need.Text, name)
			}
		}
		first, err := checkedScan(t, src, need)
		if err != nil {
			requireDataError(t, err)
			return
		}
		// Scan again in blocks of another size: the rows must not change.
		src.BlockRows = 0
		if blockRows == 0 {
			src.BlockRows = 2
		}
		second, err := checkedScan(t, src, need)
		if err != nil {
			t.Fatalf("second scan failed where the first did not: %v", err)
		}
		first.Blocks = nil
		if d := diff(second, first); d != "" {
			t.Fatalf("second scan differs from the first:\n%s", d)
		}
	})
}

// checkedScan scans src, checking each block as it comes.
func checkedScan(t *testing.T, src *csvsource.File, need fit.Need) (result, error) {
	t.Helper()
	limit := src.BlockRows
	if limit <= 0 {
		limit = csvsource.DefaultBlockRows
	}
	var r result
	r.Numeric, r.Text = map[string][]float64{}, map[string][]string{}
	last := int64(0)
	err := src.Scan(context.Background(), need, func(b *fit.Block) error {
		if b.Rows < 1 || b.Rows > limit {
			t.Fatalf("block of %d rows; want 1 to %d", b.Rows, limit)
		}
		if len(b.Line) != b.Rows {
			t.Fatalf("%d lines for %d rows", len(b.Line), b.Rows)
		}
		for _, line := range b.Line {
			if line <= last {
				t.Fatalf("line %d after line %d", line, last)
			}
			last = line
		}
		if len(b.Numeric) != len(need.Numeric) || len(b.Text) != len(need.Text) {
			t.Fatalf("%d numeric and %d text columns; want %d and %d",
				len(b.Numeric), len(b.Text), len(need.Numeric), len(need.Text))
		}
		for _, name := range need.Numeric {
			v, ok := b.Numeric[name]
			if !ok || len(v) != b.Rows {
				t.Fatalf("numeric %q: %d values for %d rows", name, len(v), b.Rows)
			}
			for _, x := range v {
				if math.IsInf(x, 0) {
					t.Fatalf("numeric %q holds %v; want infinities as NaN", name, x)
				}
			}
		}
		for _, name := range need.Text {
			v, ok := b.Text[name]
			if !ok || len(v) != b.Rows {
				t.Fatalf("text %q: %d values for %d rows", name, len(v), b.Rows)
			}
			for _, s := range v {
				if s != strings.TrimSpace(s) {
					t.Fatalf("text %q holds %q, not trimmed", name, s)
				}
			}
		}
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

// requireDataError fails t unless err is an *Error that says where it is.
func requireDataError(t *testing.T, err error) {
	t.Helper()
	var e *csvsource.Error
	if !errors.As(err, &e) {
		t.Fatalf("error %T %v; want a *csvsource.Error", err, err)
	}
	if e.File != "fuzz.csv" || e.Line < 0 || e.Err == nil {
		t.Fatalf("error %+v does not say where it is", e)
	}
}

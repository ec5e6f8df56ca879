package fit

import (
	"context"
	"fmt"
	"slices"
)

// Table is an in-memory Source: columns held as slices. It suits tests,
// small data and rows already read from elsewhere.
type Table struct {
	Numeric map[string][]float64
	Text    map[string][]string
	// BlockRows is the rows per block (default 4096).
	BlockRows int
}

// Columns lists the table's columns, numeric then text, each sorted.
func (t *Table) Columns() []string {
	var out []string
	for k := range t.Numeric {
		out = append(out, k)
	}
	for k := range t.Text {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}

// Rows is the number of rows (the length of any column).
func (t *Table) Rows() int {
	for _, c := range t.Numeric {
		return len(c)
	}
	for _, c := range t.Text {
		return len(c)
	}
	return 0
}

// Scan delivers the table in blocks of BlockRows rows.
func (t *Table) Scan(ctx context.Context, need Need, fn func(*Block) error) error {
	n := t.Rows()
	for _, c := range need.Numeric {
		if len(t.Numeric[c]) != n {
			return fmt.Errorf("table: numeric column %q missing or of the wrong length", c)
		}
	}
	for _, c := range need.Text {
		if len(t.Text[c]) != n {
			return fmt.Errorf("table: text column %q missing or of the wrong length", c)
		}
	}
	step := t.BlockRows
	if step <= 0 {
		step = 4096
	}
	b := &Block{Numeric: map[string][]float64{}, Text: map[string][]string{}}
	for lo := 0; lo < n; lo += step {
		if err := ctx.Err(); err != nil {
			return err
		}
		hi := min(n, lo+step)
		b.Rows = hi - lo
		for _, c := range need.Numeric {
			b.Numeric[c] = t.Numeric[c][lo:hi]
		}
		for _, c := range need.Text {
			b.Text[c] = t.Text[c][lo:hi]
		}
		b.Line = b.Line[:0]
		for r := lo; r < hi; r++ {
			b.Line = append(b.Line, int64(r+2)) // as if row 1 were a header
		}
		if err := fn(b); err != nil {
			return err
		}
	}
	return nil
}

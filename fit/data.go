package fit

import "context"

// Block is a batch of rows, stored column by column. Sources fill only the
// columns a fit asked for (see Need).
//
// Missing values: a numeric cell that was empty, NULL, "NA", "NaN" or
// non-finite is NaN in Numeric; a missing text cell is "" in Text. The
// engine drops such rows and counts them per column.
type Block struct {
	// Rows is the number of rows in the block.
	Rows int
	// Numeric holds the numeric columns, each of length Rows.
	Numeric map[string][]float64
	// Text holds the text (factor) columns, each of length Rows.
	Text map[string][]string
	// Line gives, for each row, where it came from in the source (a CSV
	// line number, or a row ordinal for a database query), so errors can
	// point at it. It may be nil, in which case rows are counted from 1.
	Line []int64
}

// Need says which columns a scan must deliver and how to read them.
type Need struct {
	Numeric []string
	Text    []string
}

// Source delivers rows in blocks. Scan may be called more than once (a fit
// makes several passes over its rows); every call must deliver the same rows
// in the same order. fn must not keep the block after it returns.
type Source interface {
	// Columns lists the column names the source can deliver.
	Columns() []string
	// Scan calls fn once per block of rows until the rows are exhausted,
	// fn returns an error, or ctx is done.
	Scan(ctx context.Context, need Need, fn func(*Block) error) error
}

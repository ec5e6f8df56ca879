// Package csvsource reads comma-separated files as a fit.Source, streaming
// them in blocks so that memory does not grow with the number of rows.
//
// The format is RFC 4180 CSV in UTF-8, as spreadsheets and most tools write
// it:
//
//   - The first line names the columns. A UTF-8 byte-order mark before it
//     is skipped, spaces around names are trimmed, and every column must
//     have a name of its own.
//   - Fields are separated by commas (not semicolons or tabs); a field
//     holding a comma, a quote or a line break is enclosed in double quotes,
//     with a quote inside it written twice. Empty lines are skipped. Every
//     other line must have as many fields as the header.
//   - A numeric cell is a plain decimal number, such as 12, -0.5 or 1.2e-3,
//     with '.' as the decimal point and no thousands separators. Spaces
//     around it are ignored. An empty cell, NA, N/A, NaN or null (in any
//     case) is a missing value, and so are Inf, +Inf, -Inf and Infinity (in
//     any case), which the engine cannot fit. Missing values are NaN in
//     fit.Block.Numeric; the engine drops such rows and counts them.
//   - A text cell is taken as it is, less surrounding spaces; an empty one
//     is missing (""). Words such as NA are values in a text column.
//
// Only the columns a scan asks for are parsed, so a bad cell in a column no
// fit uses is no error.
package csvsource

import (
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
)

// DefaultBlockRows is the number of rows per block when File.BlockRows is
// not set.
const DefaultBlockRows = 4096

// File is a CSV file read as a fit.Source. Each Scan reads the file again
// from the start. A File may be scanned by several goroutines at once as
// long as none changes BlockRows meanwhile.
type File struct {
	// BlockRows is the largest number of rows Scan passes to its function
	// at once; zero or less means DefaultBlockRows. Memory for a scan is
	// about BlockRows times the size of one row.
	BlockRows int

	name    string
	open    func() (io.ReadCloser, error)
	columns []string
	index   map[string]int // column name → position in the header
}

var _ fit.Source = (*File)(nil)

// Open opens the CSV file at path, reading and checking its header. It
// reads nothing else until Scan.
func Open(path string) (*File, error) {
	return New(path, func() (io.ReadCloser, error) { return os.Open(path) })
}

// New returns a File that gets its contents from open, which is called once
// here to read the header and once for each Scan; each call must yield the
// same bytes. name stands for the file in error messages.
func New(name string, open func() (io.ReadCloser, error)) (*File, error) {
	f := &File{BlockRows: DefaultBlockRows, name: name, open: open}
	rc, err := open()
	if err != nil {
		return nil, err
	}
	defer rc.Close() // reading only: a close error tells nothing
	_, columns, err := f.newReader(rc)
	if err != nil {
		return nil, err
	}
	f.columns = columns
	f.index = make(map[string]int, len(columns))
	for i, c := range columns {
		f.index[c] = i
	}
	return f, nil
}

// Name returns the name the File was opened with.
func (f *File) Name() string { return f.name }

// Columns returns the column names in header order.
func (f *File) Columns() []string { return slices.Clone(f.columns) }

// Scan reads the file from the start and calls fn with each block of at
// most BlockRows rows, in file order; fn is not called for a file with no
// rows. The block holds the columns need names; its Line gives the 1-based
// line each row starts on.
//
// The block and its slices are reused for the next call: fn must not keep
// them, or anything in them other than the text strings, after it returns.
//
// Scan stops at the first bad row, with an *Error naming its line (and
// column, for a bad cell); it delivers none of the rows of the block that
// holds it. It returns the error fn returns, or ctx.Err() if ctx is done;
// ctx is checked before each block.
func (f *File) Scan(ctx context.Context, need fit.Need, fn func(*fit.Block) error) (err error) {
	s, err := f.newScan(need)
	if err != nil {
		return err
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	rc, err := f.open()
	if err != nil {
		return err
	}
	defer func() {
		if cerr := rc.Close(); err == nil {
			err = cerr
		}
	}()
	cr, columns, err := f.newReader(rc)
	if err != nil {
		return err
	}
	if !slices.Equal(columns, f.columns) {
		return f.errorf(0, "", "the header changed since the file was opened (was %s, now %s)",
			strings.Join(f.columns, ","), strings.Join(columns, ","))
	}
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		done, err := s.fill(cr)
		if err != nil {
			return err
		}
		if s.block.Rows > 0 {
			if err := fn(&s.block); err != nil {
				return err
			}
		}
		if done {
			return nil
		}
	}
}

// scan is the state of one Scan: where the needed columns are, and the
// block their values go into.
type scan struct {
	f       *File
	numIdx  []int // header positions of the numeric columns
	numBuf  [][]float64
	textIdx []int // header positions of the text columns
	textBuf [][]string
	lineBuf []int64
	block   fit.Block
}

// newScan checks need against the header and sets up the block.
func (f *File) newScan(need fit.Need) (*scan, error) {
	if err := f.checkNeed(need); err != nil {
		return nil, err
	}
	size := f.BlockRows
	if size <= 0 {
		size = DefaultBlockRows
	}
	s := &scan{
		f:       f,
		lineBuf: make([]int64, size),
		block: fit.Block{
			Numeric: make(map[string][]float64, len(need.Numeric)),
			Text:    make(map[string][]string, len(need.Text)),
		},
	}
	for _, name := range need.Numeric {
		if _, dup := s.block.Numeric[name]; dup {
			continue
		}
		s.block.Numeric[name] = nil
		s.numIdx = append(s.numIdx, f.index[name])
		s.numBuf = append(s.numBuf, make([]float64, size))
	}
	for _, name := range need.Text {
		if _, dup := s.block.Text[name]; dup {
			continue
		}
		s.block.Text[name] = nil
		s.textIdx = append(s.textIdx, f.index[name])
		s.textBuf = append(s.textBuf, make([]string, size))
	}
	return s, nil
}

// fill reads up to one block of rows into s.block. It reports done when it
// reached the end of the file.
func (s *scan) fill(cr *csv.Reader) (done bool, err error) {
	n := 0
	for n < len(s.lineBuf) {
		rec, err := cr.Read()
		if err == io.EOF {
			done = true
			break
		}
		if err != nil {
			return false, s.f.readError(err, rec, len(s.f.columns))
		}
		line, _ := cr.FieldPos(0)
		s.lineBuf[n] = int64(line)
		for k, j := range s.numIdx {
			v, err := parseNumber(rec[j])
			if err != nil {
				line, _ := cr.FieldPos(j)
				return false, &Error{File: s.f.name, Line: int64(line), Column: s.f.columns[j], Err: err}
			}
			s.numBuf[k][n] = v
		}
		for k, j := range s.textIdx {
			s.textBuf[k][n] = strings.TrimSpace(rec[j])
		}
		n++
	}
	b := &s.block
	b.Rows = n
	b.Line = s.lineBuf[:n]
	for k, j := range s.numIdx {
		b.Numeric[s.f.columns[j]] = s.numBuf[k][:n]
	}
	for k, j := range s.textIdx {
		b.Text[s.f.columns[j]] = s.textBuf[k][:n]
	}
	return done, nil
}

// maxListed is how many column names an error lists before it stops.
const maxListed = 20

// checkNeed reports the columns need names that the header lacks.
func (f *File) checkNeed(need fit.Need) error {
	var missing []string
	for _, name := range slices.Concat(need.Numeric, need.Text) {
		if _, ok := f.index[name]; !ok && !slices.Contains(missing, name) {
			missing = append(missing, name)
		}
	}
	if missing == nil {
		return nil
	}
	var b strings.Builder
	if len(missing) == 1 {
		fmt.Fprintf(&b, "no column %q", missing[0])
	} else {
		fmt.Fprintf(&b, "no columns %s", quotedList(missing, len(missing)))
	}
	var guesses []string
	for _, name := range missing {
		for _, c := range f.columns {
			if strings.EqualFold(strings.TrimSpace(name), c) {
				guesses = append(guesses, fmt.Sprintf("%q for %q", c, name))
				break
			}
		}
	}
	if guesses != nil {
		fmt.Fprintf(&b, " (did you mean %s?)", strings.Join(guesses, ", "))
	}
	fmt.Fprintf(&b, "; the header has %s", quotedList(f.columns, maxListed))
	return &Error{File: f.name, Err: errors.New(b.String())}
}

// quotedList quotes names and joins them with commas, listing at most
// limit of them.
func quotedList(names []string, limit int) string {
	var b strings.Builder
	for i, name := range names {
		if i == limit {
			fmt.Fprintf(&b, ", … (%d more)", len(names)-limit)
			break
		}
		if i > 0 {
			b.WriteString(", ")
		}
		fmt.Fprintf(&b, "%q", name)
	}
	return b.String()
}

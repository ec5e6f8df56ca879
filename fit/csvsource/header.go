package csvsource

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"strconv"
	"strings"
)

// readBufferSize is the size of the buffer between the file and the CSV
// parser.
const readBufferSize = 64 << 10

var utf8BOM = []byte{0xEF, 0xBB, 0xBF}

// newReader returns a CSV reader over r, past a UTF-8 byte-order mark if r
// starts with one, and positioned after the header, which it returns with
// the names trimmed and checked. Line numbers the reader reports count from
// the first line of r.
func (f *File) newReader(r io.Reader) (*csv.Reader, []string, error) {
	br := bufio.NewReaderSize(r, readBufferSize)
	start, _ := br.Peek(len(utf8BOM)) // an error here shows up again below
	switch {
	case bytes.HasPrefix(start, utf8BOM):
		if _, err := br.Discard(len(utf8BOM)); err != nil {
			return nil, nil, err
		}
	case bytes.HasPrefix(start, []byte{0xFF, 0xFE}), bytes.HasPrefix(start, []byte{0xFE, 0xFF}):
		return nil, nil, f.errorf(0, "", "looks like UTF-16 text; curvewatch reads UTF-8 CSV (save the file as UTF-8)")
	}

	cr := csv.NewReader(br)
	cr.ReuseRecord = true
	// Fields are trimmed anyway; trimming leading space in the parser also
	// lets `1, "a,b"` read as two fields instead of failing on the quote.
	cr.TrimLeadingSpace = true

	rec, err := cr.Read()
	if err == io.EOF {
		return nil, nil, f.errorf(0, "", "the file is empty; its first line must name the columns, like time,flow,site")
	}
	if err != nil {
		return nil, nil, f.readError(err, rec, 0)
	}
	line, _ := cr.FieldPos(0)
	names := make([]string, len(rec))
	for i, s := range rec {
		names[i] = strings.TrimSpace(s)
	}
	if err := checkHeader(names); err != nil {
		return nil, nil, &Error{File: f.name, Line: int64(line), Err: err}
	}
	cr.FieldsPerRecord = len(names)
	return cr, names, nil
}

// checkHeader reports every problem with a header's names, or nil.
func checkHeader(names []string) error {
	if len(names) == 1 {
		switch {
		case strings.Contains(names[0], ";"):
			return errors.New("looks like a semicolon-separated file; curvewatch reads comma-separated CSV")
		case strings.Contains(names[0], "\t"):
			return errors.New("looks like a tab-separated file; curvewatch reads comma-separated CSV")
		}
	}
	if allNumbers(names) {
		return errors.New("the first line looks like data, not a header; the first line must name the columns, like time,flow,site")
	}

	var problems []string
	var unnamed []string
	first := make(map[string]int, len(names)) // name → 1-based position
	dups := make(map[string][]string)         // name → positions, in order
	var dupOrder []string
	for i, name := range names {
		pos := strconv.Itoa(i + 1)
		if name == "" {
			unnamed = append(unnamed, pos)
			continue
		}
		j, seen := first[name]
		if !seen {
			first[name] = i + 1
			continue
		}
		if dups[name] == nil {
			dups[name] = []string{strconv.Itoa(j)}
			dupOrder = append(dupOrder, name)
		}
		dups[name] = append(dups[name], pos)
	}
	switch len(unnamed) {
	case 0:
	case 1:
		problems = append(problems, fmt.Sprintf("column %s has no name", unnamed[0]))
	default:
		problems = append(problems, fmt.Sprintf("columns %s have no name", andList(unnamed)))
	}
	for _, name := range dupOrder {
		pos := dups[name]
		both := "both"
		if len(pos) > 2 {
			both = "all"
		}
		problems = append(problems, fmt.Sprintf("columns %s are %s named %q", andList(pos), both, name))
	}
	if problems == nil {
		return nil
	}
	return errors.New(strings.Join(problems, "; ") + " (every column needs a name of its own)")
}

// allNumbers reports whether every name is a number, as in a file whose
// header line is missing.
func allNumbers(names []string) bool {
	for _, name := range names {
		if !isDecimal(name) {
			return false
		}
		if _, err := strconv.ParseFloat(name, 64); err != nil {
			return false
		}
	}
	return true
}

// andList joins items as "a", "a and b" or "a, b and c".
func andList(items []string) string {
	switch len(items) {
	case 0:
		return ""
	case 1:
		return items[0]
	}
	return strings.Join(items[:len(items)-1], ", ") + " and " + items[len(items)-1]
}

// readError turns an error from csv.Reader.Read into one that names the
// file and line. rec is the record Read returned with the error. want is
// the number of fields a data row must have, or 0 while reading the header.
func (f *File) readError(err error, rec []string, want int) error {
	var pe *csv.ParseError
	if !errors.As(err, &pe) {
		return err // an I/O error: it names the file itself
	}
	if errors.Is(pe.Err, csv.ErrFieldCount) {
		hint := ""
		if len(rec) > want {
			hint = " (enclose in quotes a value that contains a comma)"
		}
		return f.errorf(int64(pe.StartLine), "", "%d fields, but the header has %d columns%s", len(rec), want, hint)
	}
	const quoteHint = `write a quote inside a value as "" and enclose the whole value in quotes`
	if pe.StartLine != pe.Line {
		return &Error{File: f.name, Line: int64(pe.StartLine), Err: fmt.Errorf(
			"%w (a quoted value that starts on this line runs to line %d, byte %d: is its closing quote missing?)",
			pe.Err, pe.Line, pe.Column)}
	}
	return &Error{File: f.name, Line: int64(pe.Line), Err: fmt.Errorf(
		"%w at byte %d (%s)", pe.Err, pe.Column, quoteHint)}
}

// errorf returns an *Error for f.
func (f *File) errorf(line int64, column, format string, args ...any) error {
	return &Error{File: f.name, Line: line, Column: column, Err: fmt.Errorf(format, args...)}
}

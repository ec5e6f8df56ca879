package csvsource

import (
	"fmt"
	"strings"
	"unicode/utf8"
)

// Error is a problem with the contents of a CSV file. It says where the
// problem is so that a person can find and fix it; the message reads like
//
//	rows.csv line 17, column "flow": "abc" is not a number (…)
//
// Errors from opening or reading the file itself (a missing file, a failed
// read) are returned as they are, not as *Error.
type Error struct {
	// File is the name given to Open or New.
	File string
	// Line is the 1-based line the problem is on, or 0 when the problem
	// concerns the file as a whole (say, a column a scan needs and the
	// header lacks).
	Line int64
	// Column is the name of the column whose cell is at fault, or "" when
	// the problem is not in one cell.
	Column string
	// Err says what is wrong. It may wrap an encoding/csv error such as
	// csv.ErrQuote.
	Err error
}

func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, " line %d", e.Line)
	}
	if e.Column != "" {
		fmt.Fprintf(&b, ", column %q", e.Column)
	}
	b.WriteString(": ")
	b.WriteString(e.Err.Error())
	return b.String()
}

// Unwrap returns e.Err.
func (e *Error) Unwrap() error { return e.Err }

// maxQuoted is how many bytes of a cell an error message shows.
const maxQuoted = 40

// quoteCell quotes a cell for an error message, shortening a long one.
func quoteCell(s string) string {
	if len(s) <= maxQuoted {
		return fmt.Sprintf("%q", s)
	}
	cut := maxQuoted
	for cut > 0 && !utf8.RuneStart(s[cut]) {
		cut--
	}
	return fmt.Sprintf("%q…", s[:cut])
}

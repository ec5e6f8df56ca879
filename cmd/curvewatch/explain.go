package main

import (
	"errors"
	"fmt"
	"strings"

	"github.com/curvewatch/curvewatch/fit"
)

// specProblems rewrites a *fit.SpecError as one "FILE:LINE: …" line per
// problem, the form editors jump to. Other errors pass through.
func specProblems(err error, file, intro string) error {
	var se *fit.SpecError
	if !errors.As(err, &se) || len(se.Problems) == 0 {
		return err
	}
	var b strings.Builder
	b.WriteString(intro)
	for _, p := range se.Problems {
		b.WriteString("\n  " + file)
		if p.Line > 0 {
			fmt.Fprintf(&b, ":%d", p.Line)
		}
		b.WriteString(": ")
		if p.Path != "" {
			b.WriteString(p.Path + ": ")
		}
		b.WriteString(p.Message)
	}
	return &wrapped{msg: b.String(), err: err}
}

// inFile names the data file in a *fit.RowError, which knows the line and
// column of a bad row but not the file it came from, so that the message
// reads like the CSV reader's own: `rows.csv line 17, column "flow": …`.
func inFile(err error, file string) error {
	var re *fit.RowError
	if !errors.As(err, &re) {
		return err
	}
	msg := err.Error()
	at := re.Error()
	if !strings.Contains(msg, at) {
		return err
	}
	return &wrapped{msg: strings.Replace(msg, at, file+" "+at, 1), err: err}
}

// wrapped is an error with a message of its own around another.
type wrapped struct {
	msg string
	err error
}

func (w *wrapped) Error() string { return w.msg }
func (w *wrapped) Unwrap() error { return w.err }

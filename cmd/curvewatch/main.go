// Command curvewatch fits generalized additive models to environmental
// sensor feeds and watches the fitted curves for shifts.
//
// Run `curvewatch help` for the list of commands, and
// `curvewatch COMMAND --help` for what one command does.
package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	err := run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	os.Exit(exit(err, os.Stderr))
}

// Exit codes. They are part of the command-line contract (DESIGN.md).
const (
	exitOK     = 0
	exitFailed = 1 // an error: bad input, a failed fit, an unwritable file
	exitUsage  = 2 // the command line itself was wrong
	exitBreach = 3 // compare: a curve shift breached its tolerance
)

// exitError carries an exit code other than exitFailed. A nil err means
// the command has already said everything it had to say.
type exitError struct {
	code int
	err  error
}

func (e *exitError) Error() string {
	if e.err == nil {
		return fmt.Sprintf("exit status %d", e.code)
	}
	return e.err.Error()
}

func (e *exitError) Unwrap() error { return e.err }

// usageErrorf reports a wrong command line (exit code 2).
func usageErrorf(format string, args ...any) error {
	return &exitError{code: exitUsage, err: fmt.Errorf(format, args...)}
}

// exit prints err, if there is anything to print, and returns the process
// exit code for it. This is the one place errors become exit codes.
func exit(err error, stderr io.Writer) int {
	if err == nil {
		return exitOK
	}
	code := exitFailed
	var ee *exitError
	if errors.As(err, &ee) {
		code = ee.code
		if ee.err == nil {
			return code
		}
	}
	fmt.Fprintln(stderr, err)
	return code
}

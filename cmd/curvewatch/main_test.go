package main

import (
	"bytes"
	"context"
	"strings"
	"testing"
)

// result is what one in-process run of curvewatch produced.
type result struct {
	stdout, stderr string
	code           int
}

// cli runs curvewatch in-process with args, mapping its error to an exit
// code (and printing it) the way main does.
func cli(t *testing.T, args ...string) result {
	t.Helper()
	var out, errb bytes.Buffer
	code := exit(run(context.Background(), args, &out, &errb), &errb)
	return result{stdout: out.String(), stderr: errb.String(), code: code}
}

// wantCode fails the test if r did not exit with code.
func (r result) wantCode(t *testing.T, code int) {
	t.Helper()
	if r.code != code {
		t.Fatalf("exit code %d, want %d\nstdout:\n%s\nstderr:\n%s", r.code, code, r.stdout, r.stderr)
	}
}

// wantStderr fails the test unless stderr holds every one of parts.
func (r result) wantStderr(t *testing.T, parts ...string) {
	t.Helper()
	for _, p := range parts {
		if !strings.Contains(r.stderr, p) {
			t.Errorf("stderr lacks %q; it is:\n%s", p, r.stderr)
		}
	}
}

func TestHelpListsCommands(t *testing.T) {
	for _, args := range [][]string{{"help"}, {"--help"}, {"-h"}} {
		r := cli(t, args...)
		r.wantCode(t, exitOK)
		for _, c := range commands {
			if !strings.Contains(r.stdout, "  "+c.name+" ") || !strings.Contains(r.stdout, c.summary) {
				t.Errorf("%v: the overview does not list %s with its summary:\n%s", args, c.name, r.stdout)
			}
		}
	}
}

func TestNoCommandIsUsageError(t *testing.T) {
	r := cli(t)
	r.wantCode(t, exitUsage)
	r.wantStderr(t, "Commands:", "fit", "predict")
}

func TestUnknownCommand(t *testing.T) {
	r := cli(t, "fitt")
	r.wantCode(t, exitUsage)
	r.wantStderr(t, `unknown command "fitt"`, `did you mean "fit"?`, "curvewatch help")

	r = cli(t, "--data", "rows.csv")
	r.wantCode(t, exitUsage)
	r.wantStderr(t, "the command comes first")
}

// Every command's --help teaches the same things: what it does, an
// example, what it writes, its flags and its exit codes.
func TestCommandHelp(t *testing.T) {
	for _, c := range commands {
		for _, args := range [][]string{{c.name, "--help"}, {c.name, "-h"}, {"help", c.name}} {
			r := cli(t, args...)
			r.wantCode(t, exitOK)
			for _, part := range []string{"curvewatch " + c.name + ": ", "Usage:", "Example:\n  curvewatch " + c.name, "Writes:", "Flags:", "--verbose", "Exit codes:\n  0  ", "  2  "} {
				if !strings.Contains(r.stdout, part) {
					t.Errorf("%v: the help lacks %q:\n%s", args, part, r.stdout)
				}
			}
			for i, line := range strings.Split(r.stdout, "\n") {
				if len([]rune(line)) > 80 {
					t.Errorf("%v: help line %d is %d characters wide: %q", args, i+1, len([]rune(line)), line)
				}
			}
		}
	}
}

func TestExitCodes(t *testing.T) {
	var buf bytes.Buffer
	cases := []struct {
		err   error
		code  int
		print string
	}{
		{nil, exitOK, ""},
		{context.Canceled, exitFailed, "context canceled\n"},
		{usageErrorf("fit: bad"), exitUsage, "fit: bad\n"},
		{&exitError{code: exitBreach}, exitBreach, ""},
	}
	for _, c := range cases {
		buf.Reset()
		if got := exit(c.err, &buf); got != c.code || buf.String() != c.print {
			t.Errorf("exit(%v) = %d printing %q, want %d printing %q", c.err, got, buf.String(), c.code, c.print)
		}
	}
}

package main

import (
	"context"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"
)

// command is one subcommand of curvewatch. To add one, write its file
// (flags, help and run function) and add a line to commands.
type command struct {
	name string
	// summary is the one line `curvewatch help` teaches it with.
	summary string
	run     func(ctx context.Context, e *env, args []string) error
}

// env is what a command may touch besides its arguments: tests run commands
// in-process with their own writers.
type env struct {
	stdout io.Writer // results: summaries and reports
	stderr io.Writer // progress, notices, logs
}

// commands lists the subcommands in the order `curvewatch help` shows them.
var commands = []command{
	{name: "demo", summary: "watch invented river sondes drift: a throwaway database, the daemon, alerts", run: runDemo},
	{name: "fit", summary: "fit a model spec to CSV rows; writes the fit document, prints a summary", run: runFit},
	{name: "predict", summary: "evaluate a fit document on new CSV rows; adds link, link_se, response", run: runPredict},
	{name: "compare", summary: "compare a candidate fit with a reference fit of the same model; exit 3 on a breach", run: runCompare},
	{name: "validate", summary: "check the daemon config: schedules, specs, source tables and columns", run: runValidate},
	{name: "serve", summary: "run the daemon: scheduled refits, alerts, metrics, the dashboard", run: runServe},
	{name: "run", summary: "refit one configured model now from its source table, as the daemon would", run: runRun},
	{name: "history", summary: "list a model's recorded fits: when, rows, deviance explained, verdicts", run: runHistory},
	{name: "baseline", summary: "pin a succeeded fit as a model's baseline, or show the baseline", run: runBaseline},
	{name: "migrate", summary: "create or update the daemon's tables in its schema (--down removes them)", run: runMigrate},
}

func lookup(name string) (command, bool) {
	for _, c := range commands {
		if c.name == name {
			return c, true
		}
	}
	return command{}, false
}

// run runs curvewatch with args (without the program name). Errors come
// back prefixed with the command's name; exit turns them into exit codes.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	e := &env{stdout: stdout, stderr: stderr}
	if len(args) == 0 {
		writeOverview(stderr)
		return &exitError{code: exitUsage}
	}
	name, rest := args[0], args[1:]
	switch name {
	case "help", "-h", "-help", "--help":
		return runHelp(ctx, e, rest)
	}
	if strings.HasPrefix(name, "-") {
		return usageErrorf("curvewatch: the command comes first, then its flags (as in curvewatch fit --data rows.csv ...); %q is not a command; run 'curvewatch help' for the list", name)
	}
	cmd, ok := lookup(name)
	if !ok {
		return unknownCommand(name)
	}
	if err := cmd.run(ctx, e, rest); err != nil {
		return fmt.Errorf("%s: %w", cmd.name, err)
	}
	return nil
}

// runHelp shows the overview, or one command's help with `help COMMAND`.
func runHelp(ctx context.Context, e *env, args []string) error {
	if len(args) == 0 {
		writeOverview(e.stdout)
		return nil
	}
	cmd, ok := lookup(args[0])
	if !ok {
		return unknownCommand(args[0])
	}
	return cmd.run(ctx, e, []string{"--help"})
}

func unknownCommand(name string) error {
	hint := ""
	for _, c := range commands {
		if strings.HasPrefix(c.name, name) || strings.HasPrefix(name, c.name) {
			hint = fmt.Sprintf(" (did you mean %q?)", c.name)
			break
		}
	}
	return usageErrorf("curvewatch: unknown command %q%s; run 'curvewatch help' for the list", name, hint)
}

func writeOverview(w io.Writer) {
	fmt.Fprint(w, `curvewatch fits additive models (smooth curves plus linear and factor
terms) to sensor data, and watches the fitted curves for shifts.

Usage:
  curvewatch COMMAND [flags]

Commands:
`)
	tw := tabwriter.NewWriter(w, 0, 0, 3, ' ', 0)
	for _, c := range commands {
		fmt.Fprintf(tw, "  %s\t%s\n", c.name, c.summary)
	}
	if err := tw.Flush(); err != nil {
		return
	}
	fmt.Fprint(w, `
Run 'curvewatch COMMAND --help' (or 'curvewatch help COMMAND') for what a
command reads and writes, an example, and its exit codes.
`)
}

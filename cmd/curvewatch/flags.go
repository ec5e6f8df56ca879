package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"strings"
)

// help is the text a command's --help teaches with, section by section.
type help struct {
	title   string // what the command does, in one line
	usage   string // the command line with its required flags
	about   string // how it works, in a paragraph or two
	example string // a command line to copy
	writes  []item // what it writes, and where
	exits   []item // what each exit code means
}

// item is one labelled entry of a help section.
type item struct{ label, text string }

// flags is a command's flag set: Go's flag package with help text of our
// own, flags listed in the order they were defined, and the --verbose flag
// every command has.
type flags struct {
	fs      *flag.FlagSet
	cmd     string
	help    help
	order   []flagDoc
	verbose bool
}

// flagDoc is what the help and the checks need to know about a flag.
type flagDoc struct {
	name, arg string
	// required, when set, points at the value that must not be left
	// empty, and what says what the flag is for.
	required *string
	what     string
}

func newFlags(cmd string, h help) *flags {
	fs := flag.NewFlagSet(cmd, flag.ContinueOnError)
	fs.SetOutput(io.Discard) // parse reports errors its own way
	fs.Usage = func() {}
	return &flags{fs: fs, cmd: cmd, help: h}
}

// Required defines a flag that must be given; arg names its value in the
// help, and what says what it is for when it is missing.
func (f *flags) Required(p *string, name, arg, usage, what string) {
	f.fs.StringVar(p, name, "", usage)
	f.order = append(f.order, flagDoc{name: name, arg: arg, required: p, what: what})
}

// Int defines an integer flag with a default.
func (f *flags) Int(p *int, name, arg string, value int, usage string) {
	f.fs.IntVar(p, name, value, usage)
	f.order = append(f.order, flagDoc{name: name, arg: arg})
}

// Bool defines a switch.
func (f *flags) Bool(p *bool, name, usage string) {
	f.fs.BoolVar(p, name, false, usage)
	f.order = append(f.order, flagDoc{name: name})
}

// parse reads args. It returns done after printing the help for --help.
func (f *flags) parse(e *env, args []string) (done bool, err error) {
	f.Bool(&f.verbose, "verbose", "log debug detail (files, timings, the engine's steps) to stderr")
	err = f.fs.Parse(args)
	if errors.Is(err, flag.ErrHelp) {
		f.writeHelp(e.stdout)
		return true, nil
	}
	if err != nil {
		msg := err.Error()
		if name, ok := strings.CutPrefix(msg, "flag provided but not defined: "); ok {
			msg = "unknown flag -" + name
		}
		return false, f.usageError("%s", msg)
	}
	if f.fs.NArg() > 0 {
		return false, f.usageError("unexpected argument %q: every input is named by a flag", f.fs.Arg(0))
	}
	for _, d := range f.order {
		if d.required != nil && *d.required == "" {
			return false, f.usageError("--%s is required: %s", d.name, d.what)
		}
	}
	return false, nil
}

// usageError reports a wrong command line and points at --help.
func (f *flags) usageError(format string, args ...any) error {
	return usageErrorf("%s\nRun 'curvewatch %s --help' to see every flag.", fmt.Sprintf(format, args...), f.cmd)
}

// logger logs to stderr: warnings only, without timestamps, or everything
// with --verbose.
func (f *flags) logger(e *env) *slog.Logger {
	opt := &slog.HandlerOptions{Level: slog.LevelWarn}
	if f.verbose {
		opt.Level = slog.LevelDebug
	} else {
		opt.ReplaceAttr = func(groups []string, a slog.Attr) slog.Attr {
			if len(groups) == 0 && a.Key == slog.TimeKey {
				return slog.Attr{}
			}
			return a
		}
	}
	return slog.New(slog.NewTextHandler(e.stderr, opt))
}

func (f *flags) writeHelp(w io.Writer) {
	h := f.help
	var b strings.Builder
	fmt.Fprintf(&b, "curvewatch %s: %s\n\nUsage:\n  %s\n\n", f.cmd, h.title, h.usage)
	b.WriteString(wrap(h.about, "", "", helpWidth))
	fmt.Fprintf(&b, "\nExample:\n  %s\n\nWrites:\n", h.example)
	writeItems(&b, h.writes)
	b.WriteString("\nFlags:\n")
	for _, d := range f.order {
		fl := f.fs.Lookup(d.name)
		line := "  --" + d.name
		if d.arg != "" {
			line += " " + d.arg
		}
		usage := fl.Usage
		switch {
		case d.required != nil:
			usage += " (required)"
		case d.arg != "" && fl.DefValue != "" && fl.DefValue != "0":
			usage += " (default " + fl.DefValue + ")"
		}
		b.WriteString(line + "\n" + wrap(usage, "      ", "      ", helpWidth))
	}
	b.WriteString("\nExit codes:\n")
	writeItems(&b, h.exits)
	io.WriteString(w, b.String())
}

// helpWidth is the column help text is filled to.
const helpWidth = 78

// writeItems writes labelled entries with their texts aligned and wrapped.
func writeItems(b *strings.Builder, items []item) {
	width := 0
	for _, it := range items {
		width = max(width, len(it.label))
	}
	for _, it := range items {
		first := "  " + it.label + strings.Repeat(" ", width-len(it.label)+2)
		b.WriteString(wrap(it.text, first, strings.Repeat(" ", len(first)), helpWidth))
	}
}

// wrap fills text to width columns (counted in bytes), the first line
// starting with first and the others with rest. Blank lines in text separate
// paragraphs.
func wrap(text, first, rest string, width int) string {
	var b strings.Builder
	indent := first
	for i, para := range strings.Split(strings.TrimSpace(text), "\n\n") {
		if i > 0 {
			b.WriteString("\n")
		}
		line := indent
		for _, word := range strings.Fields(para) {
			if len(line) > len(indent) && len(line)+1+len(word) > width {
				b.WriteString(line + "\n")
				indent = rest
				line = indent
			}
			if len(line) > len(indent) {
				line += " "
			}
			line += word
		}
		b.WriteString(line + "\n")
		indent = rest
	}
	return b.String()
}

package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"time"
)

// progress tells a person watching a long run how it is getting on. It
// stays silent for short runs: it starts once a second has passed, or a
// fifth of one when the caller expects more work (say, the fit needs more
// than two passes over the rows). On a terminal it keeps one line up to
// date with \r; elsewhere (a log file, a pipe) it writes plain lines, at
// most one a second. With quiet it writes nothing.
type progress struct {
	w     io.Writer
	tty   bool
	quiet bool
	now   func() time.Time
	start time.Time
	shown bool
	last  time.Time // when a line was last written
	width int       // length of the line on a terminal
}

// progressGap is how long progress waits between plain lines, and the
// silence after which a run counts as long.
const progressGap = time.Second

// progressSoon is when a run that expects more work counts as long.
const progressSoon = 200 * time.Millisecond

// terminalGap is how often progress redraws its line on a terminal.
const terminalGap = 100 * time.Millisecond

func newProgress(w io.Writer, quiet bool) *progress {
	return &progress{w: w, tty: isTerminal(w), quiet: quiet, now: time.Now, start: time.Now()}
}

// isTerminal reports whether w is a terminal (a character device).
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

// elapsed is the time since the run started.
func (p *progress) elapsed() time.Duration { return p.now().Sub(p.start) }

// show reports msg if the run is long enough to need it; more says the
// caller expects more work.
func (p *progress) show(msg string, more bool) {
	if p.quiet {
		return
	}
	now := p.now()
	wait := progressGap
	if more {
		wait = progressSoon
	}
	if !p.shown && now.Sub(p.start) < wait {
		return
	}
	gap := progressGap
	if p.tty {
		gap = terminalGap
	}
	if p.shown && now.Sub(p.last) < gap {
		return
	}
	p.shown, p.last = true, now
	p.write(msg)
}

func (p *progress) write(msg string) {
	if !p.tty {
		fmt.Fprintln(p.w, msg)
		return
	}
	pad := max(0, p.width-len(msg))
	fmt.Fprint(p.w, "\r"+msg+strings.Repeat(" ", pad))
	p.width = len(msg)
}

// done ends the progress report with msg, if anything was shown.
func (p *progress) done(msg string) {
	if p.quiet || !p.shown {
		return
	}
	p.write(msg)
	if p.tty {
		fmt.Fprintln(p.w)
	}
}

// seconds formats a duration for progress lines.
func seconds(d time.Duration) string {
	return fmt.Sprintf("%.1fs", d.Seconds())
}

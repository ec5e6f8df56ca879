package main

import (
	"strings"
	"testing"
	"time"
)

// fakeClock is a clock the test moves by hand.
type fakeClock struct{ t time.Time }

func (c *fakeClock) now() time.Time          { return c.t }
func (c *fakeClock) advance(d time.Duration) { c.t = c.t.Add(d) }

func newTestProgress(tty, quiet bool) (*progress, *fakeClock, *strings.Builder) {
	var b strings.Builder
	c := &fakeClock{t: time.Date(2024, 6, 1, 0, 0, 0, 0, time.UTC)}
	return &progress{w: &b, tty: tty, quiet: quiet, now: c.now, start: c.now()}, c, &b
}

func TestProgressSilentWhenQuick(t *testing.T) {
	p, c, b := newTestProgress(false, false)
	for range 10 {
		c.advance(10 * time.Millisecond)
		p.show("step", true)
	}
	p.done("done")
	if b.Len() != 0 {
		t.Errorf("a 0.1 s run wrote progress: %q", b.String())
	}
}

func TestProgressPlainLines(t *testing.T) {
	p, c, b := newTestProgress(false, false)
	p.show("pass 1", false)
	c.advance(1100 * time.Millisecond)
	p.show("pass 2", false) // past a second: shown
	c.advance(300 * time.Millisecond)
	p.show("pass 3", false) // too soon after the last line
	c.advance(800 * time.Millisecond)
	p.show("pass 4", false)
	p.done("done")
	if want := "pass 2\npass 4\ndone\n"; b.String() != want {
		t.Errorf("progress wrote %q, want %q", b.String(), want)
	}
}

func TestProgressSoonWhenMoreWork(t *testing.T) {
	p, c, b := newTestProgress(false, false)
	c.advance(250 * time.Millisecond)
	p.show("pass 3", false)
	p.show("pass 3", true)
	if want := "pass 3\n"; b.String() != want {
		t.Errorf("progress wrote %q, want %q", b.String(), want)
	}
}

func TestProgressTerminal(t *testing.T) {
	p, c, b := newTestProgress(true, false)
	c.advance(2 * time.Second)
	p.show("pass 10 over many rows", false)
	c.advance(200 * time.Millisecond)
	p.show("pass 11", false)
	p.done("done")
	want := "\rpass 10 over many rows" + "\rpass 11" + strings.Repeat(" ", 15) + "\rdone" + strings.Repeat(" ", 3) + "\n"
	if b.String() != want {
		t.Errorf("progress wrote %q, want %q", b.String(), want)
	}
}

func TestProgressQuiet(t *testing.T) {
	p, c, b := newTestProgress(true, true)
	c.advance(time.Minute)
	p.show("pass 1", true)
	p.done("done")
	if b.Len() != 0 {
		t.Errorf("--quiet, yet progress wrote %q", b.String())
	}
}

package daemon

import (
	"fmt"
	"runtime"
	"runtime/debug"
)

// DefaultGCPercent is the collector's target that serve sets when GOGC is
// not in the environment (see ServeRuntime).
const DefaultGCPercent = 400

// RuntimeSettings are the Go runtime's settings for a process serving
// refits.
type RuntimeSettings struct {
	// MaxProcs is GOMAXPROCS; 0 leaves it as the environment or the
	// runtime set it.
	MaxProcs int
	// GCPercent is the collector's target (GOGC); 0 leaves it as is.
	GCPercent int
}

func (s RuntimeSettings) String() string {
	procs, gc := "as set", "as set"
	if s.MaxProcs > 0 {
		procs = fmt.Sprint(s.MaxProcs)
	}
	if s.GCPercent > 0 {
		gc = fmt.Sprint(s.GCPercent)
	}
	return fmt.Sprintf("GOMAXPROCS %s, GOGC %s", procs, gc)
}

// ServeRuntime is what serve sets for workers compute slots (Options.
// Workers), leaving alone what the environment sets (getenv looks it up):
//
//   - GOMAXPROCS: one P per running refit (twice the compute slots). A
//     refit alternates between computing, in one of the slots, and waiting
//     on the database, about twenty round trips to read its window and
//     record its fit. With as many Ps as cores and every core fitting, a
//     goroutine whose reply has arrived waits for the scheduler to preempt
//     a fit, up to 10 ms a round trip, so the next refits are not ready
//     when a slot frees. With more Ps than slots the operating system runs
//     it at once, and the slots alone bound the computing.
//   - GOGC: DefaultGCPercent. A fit allocates about 10 MB of short-lived
//     temporaries over a live heap of a few tens of megabytes, so at the
//     default of 100 the collector runs every refit or two, and the memory
//     it frees goes back to the system and is faulted in again. Four
//     times the live heap between collections costs little memory here
//     and most of that work.
func ServeRuntime(workers int, getenv func(string) string) RuntimeSettings {
	var s RuntimeSettings
	if getenv("GOMAXPROCS") == "" {
		s.MaxProcs = runningRefits(max(workers, 1))
	}
	if getenv("GOGC") == "" {
		s.GCPercent = DefaultGCPercent
	}
	return s
}

// Apply sets s and returns a function that puts back what it changed.
func (s RuntimeSettings) Apply() (restore func()) {
	var undo []func()
	if s.MaxProcs > 0 {
		procs := runtime.GOMAXPROCS(s.MaxProcs)
		undo = append(undo, func() { runtime.GOMAXPROCS(procs) })
	}
	if s.GCPercent > 0 {
		gc := debug.SetGCPercent(s.GCPercent)
		undo = append(undo, func() { debug.SetGCPercent(gc) })
	}
	return func() {
		for _, f := range undo {
			f()
		}
	}
}

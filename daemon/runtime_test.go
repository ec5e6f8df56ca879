package daemon

import (
	"runtime"
	"runtime/debug"
	"testing"
)

func TestServeRuntime(t *testing.T) {
	tests := []struct {
		name    string
		workers int
		env     map[string]string
		want    RuntimeSettings
	}{
		{"defaults", 2, nil, RuntimeSettings{MaxProcs: 4, GCPercent: DefaultGCPercent}},
		{"one worker", 1, nil, RuntimeSettings{MaxProcs: 2, GCPercent: DefaultGCPercent}},
		{"no workers taken as one", 0, nil, RuntimeSettings{MaxProcs: 2, GCPercent: DefaultGCPercent}},
		{"GOMAXPROCS from the environment", 2, map[string]string{"GOMAXPROCS": "3"}, RuntimeSettings{GCPercent: DefaultGCPercent}},
		{"GOGC from the environment", 3, map[string]string{"GOGC": "off"}, RuntimeSettings{MaxProcs: 6}},
		{"both from the environment", 3, map[string]string{"GOGC": "50", "GOMAXPROCS": "1"}, RuntimeSettings{}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := ServeRuntime(tt.workers, func(k string) string { return tt.env[k] })
			if got != tt.want {
				t.Errorf("ServeRuntime(%d, %v) = %+v, want %+v", tt.workers, tt.env, got, tt.want)
			}
		})
	}
	if s := (RuntimeSettings{MaxProcs: 4}).String(); s != "GOMAXPROCS 4, GOGC as set" {
		t.Errorf("String() = %q", s)
	}
}

// TestRuntimeApplyRestores checks that Apply sets what it says and that
// its restore puts back the settings it found (the benchmarks apply serve's
// settings inside a test binary).
func TestRuntimeApplyRestores(t *testing.T) {
	procs := runtime.GOMAXPROCS(0)
	gc := debug.SetGCPercent(-1)
	debug.SetGCPercent(gc)

	restore := RuntimeSettings{MaxProcs: procs + 3, GCPercent: gc + 150}.Apply()
	if got := runtime.GOMAXPROCS(0); got != procs+3 {
		t.Errorf("GOMAXPROCS after Apply = %d, want %d", got, procs+3)
	}
	if got := debug.SetGCPercent(gc + 150); got != gc+150 {
		t.Errorf("GC percent after Apply = %d, want %d", got, gc+150)
	}
	restore()
	if got := runtime.GOMAXPROCS(0); got != procs {
		t.Errorf("GOMAXPROCS after restore = %d, want %d", got, procs)
	}
	if got := debug.SetGCPercent(gc); got != gc {
		t.Errorf("GC percent after restore = %d, want %d", got, gc)
	}

	// Nothing to set: nothing changes.
	RuntimeSettings{}.Apply()()
	if got := runtime.GOMAXPROCS(0); got != procs {
		t.Errorf("GOMAXPROCS after an empty Apply = %d, want %d", got, procs)
	}
}

// TestOptionsCPUsAndWorkers checks how Options sizes the compute: CPUs
// defaults to GOMAXPROCS (which follows a container's CPU limit, where
// runtime.NumCPU does not), Workers to CPUs.
func TestOptionsCPUsAndWorkers(t *testing.T) {
	procs := runtime.GOMAXPROCS(0)
	tests := []struct {
		name        string
		in          Options
		cpus, works int
	}{
		{"defaults", Options{}, procs, procs},
		{"workers set", Options{Workers: 3}, procs, 3},
		{"cpus set", Options{CPUs: 6}, 6, 6},
		{"both set", Options{CPUs: 8, Workers: 2}, 8, 2},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := tt.in.withDefaults()
			if got.CPUs != tt.cpus || got.Workers != tt.works {
				t.Errorf("CPUs %d, Workers %d; want %d and %d", got.CPUs, got.Workers, tt.cpus, tt.works)
			}
		})
	}
}

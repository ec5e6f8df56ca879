package daemon

import (
	"context"
	"fmt"
	"os"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5/pgxpool"
)

// serverCPUByKind reads the CPU time the PostgreSQL server behind pool has
// used so far, in seconds, by kind of process: "backend" for the client
// connections, the background process's name from its title
// ("checkpointer", "walwriter", "autovacuum worker", …) for the others,
// and "exited" for the postmaster's own and its reaped children's. It
// works only when the server runs on this machine and /proc shows its
// processes (Linux), and reports ok = false otherwise. The fleet benchmark
// uses it to tell the database's share of the shared cores from the
// daemon's.
func serverCPUByKind(ctx context.Context, pool *pgxpool.Pool) (seconds map[string]float64, ok bool) {
	var backend int
	if err := pool.QueryRow(ctx, `SELECT pg_backend_pid()`).Scan(&backend); err != nil {
		return nil, false
	}
	// A backend's parent is the postmaster.
	be, _, ok := procStat(backend)
	if !ok {
		return nil, false
	}
	postmaster := be.parent
	ents, err := os.ReadDir("/proc")
	if err != nil {
		return nil, false
	}
	const ticks = 100.0 // USER_HZ, 100 on every Linux this runs on
	total := map[string]uint64{}
	for _, e := range ents {
		pid, err := strconv.Atoi(e.Name())
		if err != nil {
			continue
		}
		st, children, ok := procStat(pid)
		switch {
		case !ok:
		case pid == postmaster:
			total["exited"] += st.cpu + children
		case st.parent == postmaster:
			total[processKind(pid)] += st.cpu
		}
	}
	seconds = make(map[string]float64, len(total))
	for k, v := range total {
		seconds[k] = float64(v) / ticks
	}
	return seconds, true
}

// sumCPU is the server's CPU time over every kind of process.
func sumCPU(kinds map[string]float64) (seconds float64) {
	for _, v := range kinds {
		seconds += v
	}
	return seconds
}

// processKind names a server process by its title (/proc/pid/cmdline),
// "postgres: [cluster: ]what …": "backend" for a client's.
func processKind(pid int) string {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/cmdline", pid))
	if err != nil {
		return "unknown"
	}
	title := strings.TrimSpace(strings.ReplaceAll(string(b), "\x00", " "))
	if strings.Contains(title, "(") || strings.Contains(title, "[local]") {
		return "backend"
	}
	if i := strings.LastIndex(title, ": "); i >= 0 {
		title = title[i+2:]
	}
	return title
}

type procInfo struct {
	parent int
	cpu    uint64 // utime + stime, in clock ticks
}

// procStat reads /proc/pid/stat: the parent, the process's CPU ticks and
// its reaped children's.
func procStat(pid int) (info procInfo, children uint64, ok bool) {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return info, 0, false
	}
	s := string(b)
	// The command name, in parentheses, may hold spaces.
	f := strings.Fields(s[strings.LastIndexByte(s, ')')+1:])
	if len(f) < 15 {
		return info, 0, false
	}
	num := func(i int) uint64 { v, _ := strconv.ParseUint(f[i], 10, 64); return v }
	parent, err := strconv.Atoi(f[1])
	if err != nil {
		return info, 0, false
	}
	// Fields after the name: state, ppid, …, utime (11), stime (12),
	// cutime (13), cstime (14).
	return procInfo{parent: parent, cpu: num(11) + num(12)}, num(13) + num(14), true
}

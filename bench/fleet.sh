#!/usr/bin/env bash
# The fleet benchmark of issue 5: CURVEWATCH_FLEET_MODELS small models
# (default 1000; 10,000 rows and 3 curves each) due in the same slot, run by
# one daemon with a worker per core. Prints the slot's wall time against the
# sum of the pure fit times divided by the cores (target ≤ 1.2), and, for a
# local server, its CPU per model.
#
# It runs in the layouts CURVEWATCH_FLEET_LAYOUT lists (default
# "split shared"):
#   split   the local server's processes pinned to the last CPU and the
#           benchmark to the others (needs taskset and the right to re-pin
#           the server, e.g. root): the database has a core of its own, as
#           on a machine of its own, and "the cores" are the daemon's. This
#           is the layout the target is meant for; skipped, with a note,
#           where the server cannot be pinned.
#   shared  the server and the daemon share every core (the database's CPU
#           then comes out of the fits' cores; the ratio with it taken off
#           is printed too).
# Then two daemons (replicas) on the same fleet, in the last layout run:
# their throughput against one daemon's (CURVEWATCH_FLEET_MORE_REPLICAS,
# default 2; empty skips it).
#
# Needs a PostgreSQL URL in CURVEWATCH_TEST_DATABASE_URL (default: the
# machine's local server, database test); the benchmark makes and drops a
# schema of its own there.
set -euo pipefail
cd "$(dirname "$0")/.."
export CURVEWATCH_TEST_DATABASE_URL=${CURVEWATCH_TEST_DATABASE_URL:-postgres://postgres@127.0.0.1:5432/test?sslmode=disable}
export CURVEWATCH_FLEET=1
export CURVEWATCH_FLEET_MODELS=${CURVEWATCH_FLEET_MODELS:-1000}
cpus=$(nproc --all)
layouts=${CURVEWATCH_FLEET_LAYOUT-split shared}
more=${CURVEWATCH_FLEET_MORE_REPLICAS-2}

# pin_server CPUS: every process of the local server (the postmaster and its
# children; new backends inherit the postmaster's CPUs) onto CPUS.
pin_server() {
  local dir pm p
  dir=$(psql "$CURVEWATCH_TEST_DATABASE_URL" -XAtc 'SHOW data_directory' 2>/dev/null) || return 1
  pm=$(head -1 "$dir/postmaster.pid" 2>/dev/null) || return 1
  for p in "$pm" $(pgrep -P "$pm"); do taskset -a -p -c "$1" "$p" >/dev/null 2>&1 || return 1; done
}
unpin() { pin_server "0-$((cpus - 1))" || echo "fleet.sh: could not give the database server its CPUs back" >&2; }

# run LAYOUT REPLICAS: one benchmark run; prints its lines and a summary,
# and sets rate to its models per second.
run() {
  local layout=$1 replicas=$2 pin=() out line
  if [ "$layout" = split ]; then
    pin=(taskset -c "0-$((cpus - 2))")
  fi
  out=$(CURVEWATCH_FLEET_REPLICAS=$replicas "${pin[@]}" go test ./daemon/ -run '^$' -bench BenchmarkFleet -benchtime 1x -timeout 2h -v 2>&1) ||
    { printf '%s\n' "$out"; return 1; }
  printf '%s\n' "$out" | grep -E 'fleet_bench_test|^BenchmarkFleet' || true
  line=$(printf '%s\n' "$out" | awk -v r="$replicas" -v layout="$layout" '/^BenchmarkFleet(-[0-9]+)?[ \t]/ {
    for (i = 1; i <= NF; i++) m[$i] = $(i-1)
    printf "%s layout, %s replica(s), fleet of %s models: slot wall %.2f s, pure fits %.2f s per core: ratio %.2f (target ≤ 1.2); refits %.2f s per core; %.1f models/s; floor (pure fits, a goroutine per core) %.2f",
      layout, r, ENVIRON["CURVEWATCH_FLEET_MODELS"], m["wall_s"], m["purefit_s_per_core"], m["wall_over_purefit"], m["refit_s_per_core"], m["models_per_s"], m["parallel_pure_over_purefit"]
    if ("db_cpu_s" in m) printf "; the local PostgreSQL used %.1f ms of CPU per model", m["db_cpu_ms_per_model"]
    if ("db_cpu_s" in m && layout == "shared") printf ", and without it the ratio (from Start) would be %.2f", m["startup_wall_less_db_over_purefit"]
    printf "\n" }')
  echo "$line"
  summary+=("$line")
  rate=$(printf '%s\n' "$line" | sed -E 's/.*; ([0-9.]+) models\/s;.*/\1/')
}

summary=()
last=
for layout in $layouts; do
  case $layout in
    shared) ;;
    split)
      if [ "$cpus" -lt 2 ]; then echo "fleet.sh: the split layout needs 2 CPUs or more; skipped" >&2; continue; fi
      if ! pin_server "$((cpus - 1))"; then
        echo "fleet.sh: could not pin the database server to CPU $((cpus - 1)) (is it local, and may this user re-pin it?); split layout skipped" >&2
        unpin 2>/dev/null || true
        continue
      fi
      trap unpin EXIT
      echo "split layout: the database server on CPU $((cpus - 1)), the benchmark on CPUs 0-$((cpus - 2))"
      ;;
    *) echo "fleet.sh: CURVEWATCH_FLEET_LAYOUT lists $layout: want split or shared" >&2; exit 2 ;;
  esac
  run "$layout" 1
  if [ "$layout" = split ]; then
    unpin
    trap - EXIT
  fi
  last=$layout
  one=$rate
done
if [ -n "$more" ] && [ -n "$last" ]; then
  [ "$last" = split ] && { pin_server "$((cpus - 1))"; trap unpin EXIT; }
  run "$last" "$more"
  [ "$last" = split ] && { unpin; trap - EXIT; }
  summary+=("$(awk -v a="$one" -v b="$rate" -v n="$more" -v l="$last" 'BEGIN { printf "%s replicas against one (%s layout, on this machine'"'"'s cores): throughput ratio %.2f\n", n, l, b / a }')")
fi
echo
echo "summary:"
printf '  %s\n' "${summary[@]}"

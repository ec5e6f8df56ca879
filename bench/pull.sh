#!/usr/bin/env bash
# Rows per second pulled into the engine from a 1e6-row table, against
# psql's binary \copy of the same columns in the same run (target ≥ 0.8).
# Needs a PostgreSQL URL in CURVEWATCH_BENCH_DATABASE_URL (default: the
# machine's local server, database test) and psql.
set -euo pipefail
cd "$(dirname "$0")/.."
url=${CURVEWATCH_BENCH_DATABASE_URL:-postgres://postgres@127.0.0.1:5432/test?sslmode=disable}
table=curvewatch_bench_readings
psql -q "$url" <<SQL
DROP TABLE IF EXISTS $table;
SELECT setseed(0.1);
CREATE TABLE $table AS
SELECT timestamptz '2025-01-01' + n * interval '1 minute' AS observed_at,
       CASE WHEN n % 3 = 0 THEN 'S05' ELSE 'S07' END AS site,
       4 + 20 * random() AS water_temp, 10 * random() AS flow, 8 + random() AS dissolved_oxygen
FROM generate_series(1, 1000000) AS n;
CREATE INDEX ON $table (observed_at);
ANALYZE $table;
SQL
# Five rounds, each timing psql then curvewatch on the same window, so that
# both meet the same load on a shared machine; the medians are compared.
go test -c -o "${TMPDIR:-/tmp}/curvewatch-pull.test" ./jobs/source/
copies=() ours=()
for _ in 1 2 3 4 5; do
  s=$(date +%s.%N)
  psql -q "$url" -c "\\copy (SELECT water_temp, flow, dissolved_oxygen, site FROM $table ORDER BY observed_at) TO '/dev/null' WITH (FORMAT binary)"
  e=$(date +%s.%N)
  copies+=("$(awk -v s="$s" -v e="$e" 'BEGIN { printf "%.0f", 1e6 / (e - s) }')")
  ours+=("$(CURVEWATCH_BENCH_DATABASE_URL="$url" CURVEWATCH_BENCH_TABLE="$table" \
    "${TMPDIR:-/tmp}/curvewatch-pull.test" -test.run '^$' -test.bench BenchmarkPull -test.benchtime 1x |
    awk '/rows\/s/ {for (i=1;i<=NF;i++) if ($i=="rows/s") print $(i-1)}')")
done
rm -f "${TMPDIR:-/tmp}/curvewatch-pull.test"
median() { printf '%s\n' "$@" | sort -n | awk '{v[NR]=$1} END {print v[int((NR+1)/2)]}'; }
c=$(median "${copies[@]}") o=$(median "${ours[@]}")
awk -v c="$c" -v o="$o" -v cs="${copies[*]}" -v os="${ours[*]}" 'BEGIN {
  printf "psql binary \\copy: %.0f rows/s; curvewatch pull: %.0f rows/s (medians of 5 rounds); ratio %.2f (target ≥ 0.8)\n", c, o, o / c
  printf "  rounds, psql: %s\n  rounds, curvewatch: %s\n", cs, os }'
psql -q "$url" -c "DROP TABLE $table"

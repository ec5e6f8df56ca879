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
copy_best=999
for _ in 1 2 3; do
  s=$(date +%s.%N)
  psql -q "$url" -c "\\copy (SELECT water_temp, flow, dissolved_oxygen, site FROM $table ORDER BY observed_at) TO '/dev/null' WITH (FORMAT binary)"
  e=$(date +%s.%N)
  copy_best=$(awk -v a="$copy_best" -v b="$(awk -v s="$s" -v e="$e" 'BEGIN{print e-s}')" 'BEGIN{print (b<a)?b:a}')
done
ours=$(CURVEWATCH_BENCH_DATABASE_URL="$url" CURVEWATCH_BENCH_TABLE="$table" \
  go test ./jobs/source/ -run '^$' -bench BenchmarkPull -benchtime 3x | awk '/rows\/s/ {for (i=1;i<=NF;i++) if ($i=="rows/s") print $(i-1)}')
awk -v c="$copy_best" -v o="$ours" 'BEGIN {
  printf "psql binary \\copy: %.0f rows/s; curvewatch pull: %.0f rows/s; ratio %.2f (target ≥ 0.8)\n", 1e6/c, o, o/(1e6/c) }'
psql -q "$url" -c "DROP TABLE $table"

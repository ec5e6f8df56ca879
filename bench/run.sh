#!/usr/bin/env bash
# Speed and memory of the fitting engine, measured against references on
# this machine in this run (absolute times on shared machines are noise):
#   1. our REML fit (go test -bench, in memory, n = 1e6) ÷ the time numpy
#      takes only to form XᵀX of a model matrix of the same size;
#   2. peak resident memory of `curvewatch fit` streaming a CSV of 1e5 and
#      1e6 rows (flat in n is the target).
# Needs python3-numpy (Debian) and GNU time. Usage: bench/run.sh
set -euo pipefail
cd "$(dirname "$0")/.."
py=/usr/bin/python3
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

echo "== fit time, n = 1e6 (best of 3) =="
go test ./fit/ -run '^$' -bench 'BenchmarkFit/(gaussian|poisson)/n=1000000$' -benchtime 2x -count 3 | tee "$work/bench.txt" | grep '^Benchmark' || true
best() { awk -v pat="$1" '$1 ~ pat {print $3}' "$work/bench.txt" | sort -n | head -1; }
gauss_ns=$(best 'gaussian/n=1000000')
pois_ns=$(best 'poisson/n=1000000')
p=$(awk '/gaussian\/n=1000000/ {for (i=1;i<=NF;i++) if ($i=="coefficients") print $(i-1)}' "$work/bench.txt" | head -1)

echo "== numpy XᵀX, n = 1e6, p = $p (best of 5) =="
# OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE slow a current numpy on some
# processors here; unset them for this command only so the reference is fast.
numpy_s=$(env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE "$py" - "$p" <<'PY'
import sys, time
import numpy as np
p = int(float(sys.argv[1]))
x = np.random.default_rng(1).standard_normal((1_000_000, p))
best = float("inf")
for _ in range(5):
    t = time.perf_counter()
    x.T @ x
    best = min(best, time.perf_counter() - t)
print(best)
PY
)
echo "numpy XᵀX: ${numpy_s} s"
awk -v g="$gauss_ns" -v q="$pois_ns" -v n="$numpy_s" 'BEGIN {
  printf "gaussian REML fit: %.3f s = %.2f × numpy XᵀX (target ≤ 1.5)\n", g/1e9, g/1e9/n
  printf "poisson  REML fit: %.3f s = %.2f × numpy XᵀX (target ≤ 5)\n", q/1e9, q/1e9/n
}'

echo "== peak memory of curvewatch fit (streaming CSV) =="
go build -o "$work/curvewatch" ./cmd/curvewatch
go build -o "$work/gendata" ./bench/gendata
for n in 100000 1000000; do
  "$work/gendata" -n "$n" -out "$work/rows_$n.csv"
  for fam in gaussian poisson; do
    /usr/bin/time -f "%M" -o "$work/mem_${fam}_$n" "$work/curvewatch" fit --quiet \
      --data "$work/rows_$n.csv" --model "bench/model_$fam.yaml" --out "$work/fit_${fam}_${n}.json" >/dev/null
    echo "$fam n=$n: peak RSS $(cat "$work/mem_${fam}_$n") KiB"
  done
done
for fam in gaussian poisson; do
  awk -v a="$(cat "$work/mem_${fam}_100000")" -v b="$(cat "$work/mem_${fam}_1000000")" -v f="$fam" \
    'BEGIN { printf "%s: peak memory at 1e6 rows ÷ at 1e5 rows = %.2f (flat = 1)\n", f, b/a }'
done

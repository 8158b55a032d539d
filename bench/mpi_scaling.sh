#!/bin/bash
# Measured MPI efficiency on this machine: `stillpoint grad` of the 64-system training set
# (bench/mpi-training-set.toml) under `mpirun -n 1` and `mpirun -n 2` (one thread per rank),
# alternated so that both see the same machine load; medians of the wall times. The efficiency
# at K ranks is T(1) / (K T(K)). The model for larger K is the `ranks` report of stillpoint_bench.
# Usage: bench/mpi_scaling.sh [BUILD_DIR] [REPEATS]
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
build="${1:-$here/build}"
repeats="${2:-5}"
export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1 OPENBLAS_NUM_THREADS=1
input="$here/bench/mpi-training-set.toml"
wall() {
  local t0 t1
  t0=$(date +%s.%N)
  mpirun -n "$1" --oversubscribe "$build/stillpoint" grad "$input" -q > /dev/null
  t1=$(date +%s.%N)
  awk -v a="$t0" -v b="$t1" 'BEGIN {print b - a}'
}
median() { sort -g | awk '{a[NR] = $1} END {print (NR % 2) ? a[(NR + 1) / 2] : (a[NR / 2] + a[NR / 2 + 1]) / 2}'; }
t1s=() t2s=()
for _ in $(seq "$repeats"); do
  t1s+=("$(wall 1)")
  t2s+=("$(wall 2)")
done
t1=$(printf '%s\n' "${t1s[@]}" | median)
t2=$(printf '%s\n' "${t2s[@]}" | median)
printf 'MPI scaling, 64 systems (grad, whole process incl. mpirun start-up), %d runs each on %d cores:\n' "$repeats" "$(nproc)"
printf '  K = 1: %.3f s   K = 2: %.3f s   efficiency T(1) / (2 T(2)) = %.2f\n' "$t1" "$t2" "$(awk -v a="$t1" -v b="$t2" 'BEGIN {print a / (2 * b)}')"
OPENBLAS_NUM_THREADS=1 "$build/bench/stillpoint_bench" --benchmark_filter=NONE --reports=ranks 2>/dev/null

#!/bin/sh
# Benchmark of MPI sweeps (issue 20): the 64-point map validation/bench/sweep_map_64.toml run
# by `mpirun -n P trapwork sweep` at P = 1, 2, 3 and 4 ranks, one point at a time per rank
# (--jobs 1), and by one process with --jobs 2 for reference. Prints the wall time of each run,
# the speed-up over P = 1, the points and busy seconds of each computing rank and the load
# balance (mean over largest busy time of the computing ranks, from the sweep's report), and
# checks that every run wrote the same sweep.csv as P = 1 (to the last digit).
#
# Rank 0 hands out the points (polling every millisecond) and computes points on its own
# thread too, so P ranks compute on P. Rows with more ranks than cores are marked
# "oversubscribed". The machine may be shared: each row also gives the CPU seconds of the run
# (user + system, all ranks: /usr/bin/time) and the load average before it starts.
#
# usage: validation/bench/bench_sweep_mpi.sh [BUILD_DIR] [WORK_DIR]
# As root, Open MPI needs --allow-run-as-root and these two variables (harmless otherwise).
set -eu
build=$(cd "${1:-build}" && pwd)
work=${2:-$(mktemp -d)}
here=$(cd "$(dirname "$0")" && pwd)
export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
cores=$(nproc)
mkdir -p "$work"
cd "$work"
cp "$here/sweep_map_64.toml" map.toml
echo "trapwork MPI sweep benchmark: 64 points (sweep_map_64.toml), $cores cores ($(uname -m)), $(date -u +%Y-%m-%dT%H:%MZ)"
echo "build: $build ($(grep -E '^CMAKE_BUILD_TYPE' "$build/CMakeCache.txt" | cut -d= -f2)), $(mpirun --version | head -1)"
base=""
# One row: label, output folder, then the command (its report goes to <folder>.log).
row() {
  label=$1; out=$2; shift 2
  load=$(cut -d' ' -f1 /proc/loadavg)
  start=$(date +%s.%N)
  /usr/bin/time -f '%U %S' -o "$out.cpu" "$@" > "$out.log" 2>&1 || { echo "$label: failed (see $work/$out.log)"; cat "$out.log"; exit 1; }
  end=$(date +%s.%N)
  t=$(echo "$end - $start" | bc -l)
  cpu=$(awk '{print $1 + $2}' "$out.cpu")
  [ -z "$base" ] && base=$t
  same=$(cmp -s "$out/sweep.csv" p1/sweep.csv && echo "same table as P = 1" || echo "TABLE DIFFERS")
  printf '%-52s %7.1f s  speed-up %5.2f  CPU %6.1f s  load before %s  %s\n' "$label" "$t" "$(echo "$base / $t" | bc -l)" \
    "$cpu" "$load" "$same"
  sed -n '/^MPI:/,/load balance/p' "$out.log" | sed 's/^/    /'
}
for p in 1 2 3 4; do
  mark=""; [ "$p" -gt "$cores" ] && mark=" (oversubscribed)"
  row "mpirun -n $p, --jobs 1$mark" "p$p" \
    mpirun --allow-run-as-root --oversubscribe -n "$p" "$build/trapwork" sweep map.toml -o "p$p" --jobs 1
done
row "one process, --jobs 2 (threads, no MPI)" threads "$build/trapwork" sweep map.toml -o threads --jobs 2

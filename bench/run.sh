#!/bin/sh
# Runs the benchmarks built by `make bench` (bench/bench_*.c) and the scripted
# ones (bench/bench_*.sh), one after the other so they do not compete for the
# two cores. Each prints its own table
# with ratios measured side by side in the same run.
#   bench/run.sh BUILD [NAME]
build="${1:-build}"; only="${2:-}"
cd "$(dirname "$0")/.." || exit 2
status=0
for b in "$build"/bench/bench_*; do
  [ -x "$b" ] || continue
  name=$(basename "$b")
  [ -n "$only" ] && [ "$name" != "$only" ] && continue
  echo "== $name"
  ND_BUILD="$build" ND_NADIR="$PWD/$build/nadir" "$b" || status=1
  echo
done
for b in bench/bench_*.sh; do
  [ -f "$b" ] || continue
  name=$(basename "$b" .sh)
  [ -n "$only" ] && [ "$name" != "$only" ] && continue
  echo "== $name"
  ND_BUILD="$build" ND_NADIR="$PWD/$build/nadir" bash "$b" || status=1
  echo
done
exit $status

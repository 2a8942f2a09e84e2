#!/bin/bash
# Builds the libFuzzer targets (clang, -fsanitize=fuzzer,address,undefined)
# against the core sources into build-fuzz/ and runs each for a bounded
# time: ND_FUZZ_SECONDS (default 60) per target. Seeds come from
# tests/fuzz/corpus/NAME/ (and the sample and malformed files); new inputs
# go to build-fuzz/corpus-NAME/. A crash is saved under
# tests/fuzz/regressions/ (which test_format feeds to the readers) and the
# run fails. Usage: tests/fuzz/run.sh [TARGET...]   (default: xyz sdf)
set -u
cd "$(dirname "$0")/../.." || exit 1
secs="${ND_FUZZ_SECONDS:-60}"
CLANG="${CLANG:-$(command -v clang || command -v clang-14)}"
if [ -z "$CLANG" ]; then
  echo "fuzz: clang not found (Debian: apt-get install clang libclang-rt-14-dev)" >&2; exit 1
fi
out=build-fuzz
mkdir -p "$out"
src="core/lineio.c core/xyz.c core/sdf.c core/format.c core/molecule.c core/elements.c core/status.c core/smiles.c"
flags="-std=c11 -D_DEFAULT_SOURCE -g -O1 -I. -fsanitize=fuzzer,address,undefined -fno-sanitize-recover=all"
targets="${*:-xyz sdf}"
status=0
for t in $targets; do
  echo "fuzz: building $t"
  # shellcheck disable=SC2086
  "$CLANG" $flags -o "$out/fuzz_$t" "tests/fuzz/fuzz_$t.c" $src -lm || { status=1; continue; }
  mkdir -p "$out/corpus-$t" tests/fuzz/regressions
  seeds="tests/fuzz/corpus/$t"
  echo "fuzz: running $t for ${secs}s"
  "$out/fuzz_$t" -max_total_time="$secs" -max_len=8192 -timeout=10 -rss_limit_mb=2048 \
    -artifact_prefix="tests/fuzz/regressions/$t-" -print_final_stats=1 \
    "$out/corpus-$t" "$seeds" >"$out/fuzz_$t.log" 2>&1
  rc=$?
  tail -n 15 "$out/fuzz_$t.log" | grep -E "stat::|Done|ERROR|SUMMARY|crash-|runs in" || true
  if [ $rc -ne 0 ]; then
    echo "fuzz: $t found a problem (exit $rc); see $out/fuzz_$t.log and tests/fuzz/regressions/" >&2
    status=1
  else
    echo "fuzz: $t clean"
  fi
done
exit $status

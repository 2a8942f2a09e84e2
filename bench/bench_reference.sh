#!/bin/bash
# The bundled model against the reference method (GFN2-xTB through
# build/xtb-single-point and tools/xtb-single-point, the way nadir calls it:
# one process per single point) on the same 53-atom drug-like molecule,
# energy and gradient, measured side by side in this run (goal of the
# bundled model: at least 200 times faster). The model is timed twice: the
# command (nadir energy --gradient, which also reads, prints and computes
# each member's forces) and the library call the conformer search makes
# (bench_potential --time-file); both ratios are printed. Then a conformer
# search with the bundled model, with its counts and time. Medians of
# repeated runs. Skips the reference part when xtb is absent.
set -euo pipefail
cd "$(dirname "$0")/.."
NADIR=${ND_NADIR:-build/nadir}
T=$(mktemp -d)
trap 'rm -rf "$T"' EXIT
# N-(2-morpholinoethyl)-2-(4-isobutylphenyl)propanamide: 23 heavy atoms, 53 atoms
SMI='CC(C)Cc1ccc(cc1)C(C)C(=O)NCCN1CCOCC1'
"$NADIR" build "$SMI bench-ligand" -o "$T/one.xyz" 2>/dev/null
N=$(head -1 "$T/one.xyz")
# Frames: the same molecule with small seeded displacements (distinct
# structures, so nothing can be cached between calls).
frames() {  # frames COUNT OUT
  /usr/bin/python3 - "$T/one.xyz" "$1" "$2" <<'PY'
import random, sys
lines = open(sys.argv[1]).read().split("\n")
n = int(lines[0]); atoms = [l.split() for l in lines[2:2 + n]]
rng = random.Random(5)
with open(sys.argv[3], "w") as f:
    for k in range(int(sys.argv[2])):
        f.write("%d\nframe %d\n" % (n, k))
        for a in atoms:
            f.write("%s %.6f %.6f %.6f\n" % (a[0], *(float(v) + rng.gauss(0, 0.01) for v in a[1:4])))
PY
}
median() { sort -n | awk '{v[NR] = $1} END {print (NR % 2) ? v[(NR + 1) / 2] : (v[NR / 2] + v[NR / 2 + 1]) / 2}'; }
now() { date +%s.%N; }
frames 1 "$T/f1.xyz"
frames 401 "$T/f401.xyz"
# the model: (time for 401 frames - time for 1) / 400, so start-up and model
# loading are left out; one thread
per_model=()
for r in 1 2 3 4 5; do
  a=$(now); OMP_NUM_THREADS=1 "$NADIR" energy "$T/f1.xyz" --gradient >/dev/null 2>&1; b=$(now)
  OMP_NUM_THREADS=1 "$NADIR" energy "$T/f401.xyz" --gradient >/dev/null 2>&1; c=$(now)
  per_model+=("$(awk -v a="$a" -v b="$b" -v c="$c" 'BEGIN{print ((c - b) - (b - a)) / 400}')")
done
m=$(printf '%s\n' "${per_model[@]}" | median)
# the library call a conformer search makes (energy and mean gradient, no
# per-member forces, no file reading or printing), from bench_potential
BP="${ND_BUILD:-build}/bench/bench_potential"
lib=""
[ -x "$BP" ] && lib=$("$BP" --time-file "$T/one.xyz" potential/models/default.model | awk '/^ms_per_call/ {print $2 / 1000}')
printf 'molecule: %s (%d atoms)\n' "$SMI" "$N"
printf 'bundled model, nadir energy --gradient, 1 thread: %8.3f ms per structure (median of 5 runs of 400;\n' \
  "$(awk -v m="$m" 'BEGIN{print m * 1000}')"
echo '  reads and prints each structure and computes every member'"'"'s forces for the spread)'
[ -n "$lib" ] && printf 'bundled model, library call, 1 thread:        %10.3f ms per structure (energy and mean gradient,\n  what the conformer search calls; median of 21 runs of 20)\n' \
  "$(awk -v m="$lib" 'BEGIN{print m * 1000}')"
if command -v xtb >/dev/null 2>&1; then
  frames 5 "$T/f5.xyz"
  # per wrapper: the compiled one (what make dataset uses; close to the
  # method's own cost) and the script; the ratio uses the compiled one, the
  # fairer (smaller) of the two
  ref_ms() {  # ref_ms WRAPPER -> seconds per structure, median of 3 runs of 5
    local per=() a b
    for r in 1 2 3; do
      rm -f "$T/ref.jsonl"
      a=$(now)
      OMP_NUM_THREADS=1 "$NADIR" label "$T/f5.xyz" -o "$T/ref.jsonl" --potential-command "$1" \
        --threads 1 >/dev/null 2>&1
      b=$(now)
      per+=("$(awk -v a="$a" -v b="$b" 'BEGIN{print (b - a) / 5}')")
    done
    printf '%s\n' "${per[@]}" | median
  }
  WRAPC="$(dirname "$NADIR")/xtb-single-point"
  [ -x "$WRAPC" ] || WRAPC=tools/xtb-single-point
  x=$(ref_ms "$WRAPC")
  xs=$(ref_ms tools/xtb-single-point)
  printf 'GFN2-xTB single point, compiled wrapper:      %10.3f ms per structure (median of 3 runs of 5)\n' \
    "$(awk -v x="$x" 'BEGIN{print x * 1000}')"
  printf 'GFN2-xTB single point, Python wrapper:        %10.3f ms per structure (median of 3 runs of 5)\n' \
    "$(awk -v x="$xs" 'BEGIN{print x * 1000}')"
  printf 'ratio reference (compiled wrapper) / nadir energy:  %6.0f x   (goal: at least 200 x)\n' \
    "$(awk -v x="$x" -v m="$m" 'BEGIN{print x / m}')"
  [ -n "$lib" ] && printf 'ratio reference (compiled wrapper) / library call: %6.0f x   (goal: at least 200 x)\n' \
    "$(awk -v x="$x" -v m="$lib" 'BEGIN{print x / m}')"
else
  echo "GFN2-xTB: skipped (xtb not installed)"
fi
# A conformer search with the bundled model (2 threads), from its report.
a=$(now)
"$NADIR" conformers "$SMI bench-ligand" --max-tries 128 --seed 7 --report "$T/c.json" -o "$T/c.sdf" \
  --threads 2 >/dev/null 2>&1 || true
b=$(now)
/usr/bin/python3 - "$T/c.json" "$(awk -v a="$a" -v b="$b" 'BEGIN{print b - a}')" <<'PY'
import json, sys
d = json.load(open(sys.argv[1]))["molecules"][0]
s = d["search"]
fc = s["force_calls"]
print("conformer search, bundled model, 2 threads: %d rotors, %d candidates tried, %d relaxed, "
      "%d distinct minima, %d reported; %d force calls (%d sampling, %d final, %d Hessians); "
      "%.1f s (%.2f ms per force call), stopped: %s"
      % (s["rotors"], s["candidates_tried"], s["candidates_relaxed"], s["distinct_minima_found"],
         len(d.get("conformers", [])), fc["total"], fc["sampling"], fc["final_minimisation"], fc["hessians"],
         float(sys.argv[2]), 1000 * float(sys.argv[2]) / max(1, fc["total"]), s["stop_reason"]))
PY

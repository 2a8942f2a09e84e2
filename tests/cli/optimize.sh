#!/bin/bash
# nadir optimize end to end, with an analytic potential as an external
# program (tests/cli/morse_potential.py: Morse pairs, r_e = 1.213 A, so a
# diatomic's answer is known exactly) and a random-weight model for the
# domain check. Usage errors, convergence, frozen atoms, not converged,
# torsion scan, trajectory, data items, thread-count independence.
cd "$(dirname "$0")/../.." || exit 1
. tests/lib/tap.sh
T="$TAP_TMP"
POT="$PWD/tests/cli/morse_potential.py"

check "--help exits 0" "$NADIR" optimize --help
grep -q "^examples:" "$T/out" && ok "--help shows examples on stdout" || not_ok "--help shows examples"
check_fails "no input: usage error" 2 "no input file given" "$NADIR" optimize
check_fails "SMILES where a file belongs: the way to 3D named" 3 \
  "no file named 'C1CCC1 cyclobutane'; it reads as SMILES, but optimize needs 3D structures: build them first (nadir build 'C1CCC1 cyclobutane' -o start.sdf), or use nadir conformers" \
  "$NADIR" optimize 'C1CCC1 cyclobutane' --potential-command true
check_fails "a missing file that is no SMILES: the system's word" 3 "cannot open no-such-dir/x.sdf: No such file or directory" \
  "$NADIR" optimize no-such-dir/x.sdf --potential-command true
check_fails "unknown method" 2 "unknown method 'newton'" "$NADIR" optimize x.xyz --method newton
check_fails "unknown preset" 2 "unknown convergence preset 'loose'" "$NADIR" optimize x.xyz --convergence loose
check_fails "bad --scan" 2 "--scan needs four atom numbers" "$NADIR" optimize x.xyz --scan 1,2,3
check_fails "bad --scan-range" 2 "--scan-range needs FROM,TO,STEP" "$NADIR" optimize x.xyz --scan-range 10,0,5
check_fails "bad --max-force" 2 "--max-force needs a positive number" "$NADIR" optimize x.xyz --max-force -1
check_fails "two potentials" 2 "give one potential" "$NADIR" optimize x.xyz --model a --potential-command b
check_fails "missing input file" 3 "x.xyz" "$NADIR" optimize x.xyz --potential-command "$POT"

printf '2\npair\nH 0.1 0.2 0.3\nH 1.6 0.5 0.1\n' > "$T/d.xyz"
for m in lbfgs fire; do
  check "diatomic with $m" "$NADIR" optimize "$T/d.xyz" --potential-command "$POT" --method $m \
    --max-force 1e-4 -o "$T/d-$m.xyz" --report "$T/d-$m.json"
  if /usr/bin/python3 - "$T/d-$m.xyz" "$T/d-$m.json" <<'PY'
import json, math, sys
l = open(sys.argv[1]).read().split("\n")
a = [float(v) for v in l[2].split()[1:]]; b = [float(v) for v in l[3].split()[1:]]
r = math.dist(a, b)
# k = 2 D a^2 = 177 kcal/mol/A^2: a residual force 1e-4 leaves |r - r_e| < 1e-6
assert abs(r - 1.213) < 1e-5, r
rep = json.load(open(sys.argv[2]))
rec = rep["records"][0]
# FIRE may stop on the energy change (forces then below 5 x 1e-4)
assert rec["converged"] is True and rec["stopped_by"] in ("force", "energy change"), rec
assert rec["max_force"] <= (1e-4 if rec["stopped_by"] == "force" else 5e-4)
assert rec["force_calls"] >= rec["steps"] + 1
assert rep["converged"] == 1 and rep["not_converged"] == 0 and rep["failed"] == 0
assert abs(rec["energy"]) < 1e-9 and rec["initial_energy"] > 1
PY
  then ok "$m reaches r_e = 1.213 A; report says converged and why"; else not_ok "$m reaches r_e"; fi
done

cat > "$T/t.xyz" <<'XYZ'
4
chain
H  0.0000  0.0000  0.0000
H  1.3000  0.1000  0.0500
H  1.9000  1.2500 -0.1000
H  3.1000  1.4000  0.9000
XYZ
check "frozen atoms, SD output" "$NADIR" optimize "$T/t.xyz" --potential-command "$POT" --frozen 1,3 -o "$T/f.sdf" --report "$T/f.json"
if /usr/bin/python3 - "$T/t.xyz" "$T/f.sdf" "$T/f.json" <<'PY'
import json, sys
inp = [[float(v) for v in l.split()[1:]] for l in open(sys.argv[1]).read().split("\n")[2:6]]
sdf = open(sys.argv[2]).read().split("\n")
out = [[float(v) for v in l.split()[:3]] for l in sdf[4:8]]
for i in (0, 2):  # frozen atoms 1 and 3 (1-based) keep their coordinates (SD: 4 decimals)
    assert all(abs(p - q) < 5e-5 for p, q in zip(inp[i], out[i])), (inp[i], out[i])
assert any(abs(p - q) > 1e-3 for p, q in zip(inp[1], out[1]))
text = "\n".join(sdf)
assert "> <optimize_energy>" in text and "> <optimize_status>" in text and "converged (force)" in text
assert json.load(open(sys.argv[3]))["records"][0]["frozen_atoms"] == 2
PY
then ok "frozen atoms stay; data items written"; else not_ok "frozen atoms stay; data items written"; fi

check_fails "step limit: not converged" 4 "not converged: step limit of 2 reached" \
  "$NADIR" optimize "$T/t.xyz" --potential-command "$POT" --max-steps 2 --report "$T/n.json"
if /usr/bin/python3 -c "
import json; r = json.load(open('$T/n.json'))['records'][0]
assert r['converged'] is False and r['stopped_by'] == 'step limit' and r['steps'] == 2" ; then
  ok "report says not converged (step limit)"; else not_ok "report says not converged (step limit)"; fi
grep -q "NOT CONVERGED" "$T/out" && ok "table says NOT CONVERGED" || not_ok "table says NOT CONVERGED"

check "torsion scan" "$NADIR" optimize "$T/t.xyz" --potential-command "$POT" --scan 1,2,3,4 \
  --scan-range -90,90,45 -o "$T/s.xyz" --report "$T/s.json" --trajectory "$T/s-traj.xyz"
if /usr/bin/python3 - "$T/s.json" "$T/s.xyz" "$T/s-traj.xyz" <<'PY'
import json, sys
rep = json.load(open(sys.argv[1]))
rec = rep["records"][0]
pts = rec["scan"]["points"]
assert [p["target"] for p in pts] == [-90, -45, 0, 45, 90], pts
for p in pts:
    assert p["converged"] and abs(p["torsion"] - p["target"]) < 1.0, p
assert min(p["relative_energy"] for p in pts) == 0
# a potential of distances only: the profile is symmetric in the torsion
e = [p["energy"] for p in pts]
assert abs(e[0] - e[4]) < 1e-3 and abs(e[1] - e[3]) < 1e-3, e
assert open(sys.argv[2]).read().count("torsion") == 5  # one output record per angle
frames = open(sys.argv[3]).read().count("frame")
assert frames == sum(p["steps"] + 1 for p in pts), (frames, [p["steps"] for p in pts])
PY
then ok "scan holds each angle; symmetric profile; records and frames"; else not_ok "scan holds each angle"; fi

# A scan whose first angle lies far from the start: the side of the bond is
# turned rigidly to each target before relaxing (the restraint alone once
# dragged an acid's hydrogen off its oxygen), so the first frame of each
# angle has its target torsion and the butane's bond lengths.
"$NADIR" build 'CCCC butane' -o "$T/bu.sdf" --seed 3 2>/dev/null
"$NADIR" optimize "$T/bu.sdf" --potential-command "$POT" --scan 1,2,3,4 --scan-range -130,110,240 \
  --max-steps 1 --trajectory "$T/bu-traj.xyz" >/dev/null 2>&1
if /usr/bin/python3 - "$T/bu.sdf" "$T/bu-traj.xyz" <<'PY'
import math, sys
import numpy as np
def dihedral(p):
    b1, b2, b3 = p[1] - p[0], p[2] - p[1], p[3] - p[2]
    n1, n2 = np.cross(b1, b2), np.cross(b2, b3)
    return math.degrees(math.atan2(np.linalg.norm(b2) * b1 @ n2, n1 @ n2))
l = open(sys.argv[1]).read().split("\n")
n = int(l[3][:3])
start = np.array([[float(v[k:k + 10]) for k in (0, 10, 20)] for v in l[4:4 + n]])
frames, t = [], open(sys.argv[2]).read().split("\n")
i = 0
while i < len(t) and t[i].strip():
    frames.append(np.array([[float(v) for v in r.split()[1:4]] for r in t[i + 2:i + 2 + n]]))
    i += 2 + n
assert len(frames) == 4, len(frames)  # --max-steps 1: two frames per angle
assert abs(dihedral(start[:4]) - -130) > 90, "the start should lie far from the first angle"
for f, target in ((frames[0], -130), (frames[2], 110)):
    assert abs(dihedral(f[:4]) - target) < 1e-4, (dihedral(f[:4]), target)
# the first frame is the start turned: every bond length of the carbons kept
for a, b in ((0, 1), (1, 2), (2, 3)):
    assert abs(np.linalg.norm(frames[0][a] - frames[0][b]) - np.linalg.norm(start[a] - start[b])) < 1e-4
PY
then ok "scan: each angle starts at its target, the side turned rigidly"; else not_ok "scan: each angle starts at its target"; fi

check_fails "scan atom out of range" 3 "--scan 1,2,3,9: restraints: atom 9 is out of range (1..4)" \
  "$NADIR" optimize "$T/t.xyz" --potential-command "$POT" --scan 1,2,3,9
check_fails "frozen atom out of range" 3 "--frozen '1,7': atom 7 is outside 1..4" \
  "$NADIR" optimize "$T/t.xyz" --potential-command "$POT" --frozen 1,7

cat "$T/t.xyz" "$T/d.xyz" "$T/t.xyz" > "$T/three.xyz"
OMP_NUM_THREADS=1 "$NADIR" optimize "$T/three.xyz" --potential-command "$POT" -o "$T/one.xyz" >/dev/null 2>&1
OMP_NUM_THREADS=2 "$NADIR" optimize "$T/three.xyz" --potential-command "$POT" -o "$T/two.xyz" >/dev/null 2>&1
if cmp -s "$T/one.xyz" "$T/two.xyz" && [ "$(grep -c chain "$T/two.xyz")" = 2 ]; then
  ok "same output with 1 and 2 threads, records in order"; else not_ok "same output with 1 and 2 threads"; fi

check "writes a random test model" "$NADIR" energy --make-random-model "$T/r.model" --elements H,C,O --seed 3
printf '2\nbromine\nC 0 0 0\nBr 1.9 0 0\n' > "$T/br.xyz"
cat "$T/br.xyz" "$T/d.xyz" > "$T/mix.xyz"
check_fails "element outside the model" 3 "record 1: atom 2 (Br)" "$NADIR" optimize "$T/br.xyz" --model "$T/r.model"
check_fails "one bad record of two" 5 "1 record converged, 0 not converged, 1 failed" \
  "$NADIR" optimize "$T/mix.xyz" --model "$T/r.model"
# frozen atoms checked; a bad --report path fails before the work; close atoms named
printf '2\npair\nH 0.1 0.2 0.3\nH 1.6 0.5 0.1\n' > "$T/p2.xyz"
check_fails "every atom frozen" 3 "fixes all 2 atoms" "$NADIR" optimize "$T/p2.xyz" --potential-command "$POT" --frozen 1-2
check_fails "frozen atom out of range" 3 "atom 3 is outside 1..2" "$NADIR" optimize "$T/p2.xyz" --potential-command "$POT" --frozen 3
check_fails "backwards range" 3 "runs backwards" "$NADIR" optimize "$T/p2.xyz" --potential-command "$POT" --frozen 2-1
check_fails "report in a missing directory: before the work" 3 "does not exist" "$NADIR" optimize "$T/p2.xyz" --potential-command "$POT" --report "$T/nodir/r.json"
[ ! -s "$T/out" ] && ok "nothing relaxed before the report path failed" || not_ok "relaxed first" "$(cat "$T/out")"
printf '4\nclash\nH 0 0 0\nH 0 0 0\nH 1 0 0\nH 2 0 0\n' > "$T/clash.xyz"
"$NADIR" energy --make-random-model "$T/r.model" --elements H 2>/dev/null
check_fails "coincident atoms named (learned model): input error" 3 "atoms 1 and 2 are only 0.000 A apart" "$NADIR" optimize "$T/clash.xyz" --model "$T/r.model"
printf 'CCO ethanol\n' > "$T/s.smi"
check_fails "SMILES input: build suggested" 3 "nadir build makes them from SMILES" "$NADIR" optimize "$T/s.smi" --potential-command "$POT"
check_fails "-o - refused (stdout has the table)" 2 "standard output carries the table" "$NADIR" optimize "$T/p2.xyz" --potential-command "$POT" -o -
# Atoms on top of each other are the input's fault: exit 3 naming them, as in energy.
printf '3\nclash\nO 0 0 0\nH 0 0 0\nH 1 0 0\n' > "$TAP_TMP/clash.xyz"
check_fails "coincident atoms named (external program): input error" 3 "atoms 1 and 2 are only 0.000 A apart" \
  "$NADIR" optimize "$TAP_TMP/clash.xyz" --potential-command "$PWD/tests/cli/morse_potential.py"
finish

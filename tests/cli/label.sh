#!/bin/bash
# nadir label with a fake external program (tests/data/label/fake-potential):
# labels, resume after kill -9, partial last lines, failures that leave the
# dataset intact, the audit and the nudge of coincident coordinates.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
FAKE="$PWD/tests/data/label/fake-potential"
D=tests/data/label
T="$TAP_TMP"

# count_ids FILE: number of distinct "id" values; lines FILE: structure lines.
count_ids() { /usr/bin/python3 -c '
import json, sys
ids = [json.loads(l)["id"] for l in open(sys.argv[1]) if l.strip() and "elements" in l]
print(len(set(ids)), len(ids))' "$1"; }
valid_jsonl() { /usr/bin/python3 -c '
import json, sys
for i, l in enumerate(open(sys.argv[1]), 1):
    assert l.endswith("\n"), "line %d has no newline" % i
    json.loads(l)' "$1"; }

# 1. A whole run: 12 structures, one line each plus the header.
check "labels every structure" "$NADIR" label $D/clusters.xyz -o "$T/a.jsonl" --potential-command "$FAKE" --threads 2
if [ "$(count_ids "$T/a.jsonl")" = "12 12" ] && [ "$(wc -l < "$T/a.jsonl")" -eq 13 ]; then ok "12 distinct labelled lines"
else not_ok "12 distinct labelled lines" "$(count_ids "$T/a.jsonl")"; fi
# Energies against the fake program's own formula, computed here in Python
# (Morse in atomic units, CODATA 2018 bohr and hartree-to-kcal/mol factors).
if /usr/bin/python3 - "$T/a.jsonl" <<'EOF'
import json, math, sys
B = 0.529177210903; H = 4.3597447222071e-18 * 6.02214076e23 / 4184.0
for l in open(sys.argv[1]):
    d = json.loads(l)
    if "elements" not in d: continue
    x = [v / B for v in d["coordinates"]]; n = len(d["elements"]); e = -0.25 * n
    for i in range(n):
        for j in range(i + 1, n):
            r = math.dist(x[3*i:3*i+3], x[3*j:3*j+3]); t = math.exp(-1.1 * (r - 2.1)); e += 0.15 * (1 - t) ** 2
    assert abs(e * H - d["energy"]) < 1e-9 * max(1, abs(e * H)), (e * H, d["energy"])
EOF
then ok "energies match the analytic formula in kcal/mol"; else not_ok "energies match the analytic formula in kcal/mol"; fi
check_fails "a second run labels nothing new" 0 "0 to label, 12 already in" \
  "$NADIR" label $D/clusters.xyz -o "$T/a.jsonl" --potential-command "$FAKE"
[ "$(wc -l < "$T/a.jsonl")" -eq 13 ] && ok "no duplicates after a rerun" || not_ok "no duplicates after a rerun"

# Thread count does not change the file, byte for byte.
"$NADIR" label $D/clusters.xyz -o "$T/a1.jsonl" --potential-command "$FAKE" --threads 1 2>/dev/null
cmp -s "$T/a.jsonl" "$T/a1.jsonl" && ok "same dataset with 1 and 2 threads" || not_ok "same dataset with 1 and 2 threads"

# 2. Kill -9 midway, then resume: nothing lost, nothing twice. The fake
# program answers the first 5 calls and then stops answering (until its
# caller is gone), so the kill comes at a known point whatever the load.
"$NADIR" label $D/clusters.xyz -o "$T/k.jsonl" --threads 2 \
  --potential-command "$FAKE --log $T/calls.log --hang-after 5" 2>"$T/k1.err" &
pid=$!
for _ in $(seq 1 3000); do # up to 150 s: the machine may be loaded
  [ -f "$T/k.jsonl" ] && [ "$(wc -l < "$T/k.jsonl")" -ge 6 ] && break
  sleep 0.05
done
kill -9 $pid 2>/dev/null; wait $pid 2>/dev/null
before=$(($(wc -l < "$T/k.jsonl") - 1))
[ "$before" -eq 5 ] && ok "killed midway with 5 labels written" || not_ok "killed midway with 5 labels written" "$before"
check_fails "resume labels the rest" 0 "$((12 - before)) to label, $before already in" \
  "$NADIR" label $D/clusters.xyz -o "$T/k.jsonl" --threads 2 --potential-command "$FAKE"
[ "$(count_ids "$T/k.jsonl")" = "12 12" ] && ok "after resume: 12 distinct, no duplicates" \
  || not_ok "after resume: 12 distinct, no duplicates" "$(count_ids "$T/k.jsonl")"
# Same labels as the uninterrupted run, line for line once sorted.
if cmp -s <(sort "$T/a.jsonl") <(sort "$T/k.jsonl"); then ok "resumed dataset equals the uninterrupted one"
else not_ok "resumed dataset equals the uninterrupted one"; fi

# 3. A partial last line (killed while writing) is cut off and redone.
head -n 6 "$T/a.jsonl" > "$T/p.jsonl"
sed -n 7p "$T/a.jsonl" | head -c 100 >> "$T/p.jsonl"
check_fails "partial last line is cut off" 0 "cut off a partial last line (100 bytes)" \
  "$NADIR" label $D/clusters.xyz -o "$T/p.jsonl" --potential-command "$FAKE"
check "dataset is whole JSON lines again" valid_jsonl "$T/p.jsonl"
[ "$(count_ids "$T/p.jsonl")" = "12 12" ] && ok "partial line relabelled once" || not_ok "partial line relabelled once"

# 4. Failing programs: clear errors, labels already written untouched.
head -n 4 "$T/a.jsonl" > "$T/f.jsonl"
cp "$T/f.jsonl" "$T/f.orig"
check_fails "crashing program" 4 "exited with status 3; its stderr ends: fake-potential: starting | fake-potential: SCF exploded" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "$FAKE crash"
check_fails "hanging program is stopped" 4 "gave no answer within 0.3 s and was stopped" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "$FAKE hang" --timeout 0.3 --threads 2
# The timeout ends the program's whole process group, children included.
check_fails "a program whose child hangs is stopped" 4 "gave no answer within 0.3 s" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "sh -c 'sleep 613.25 & wait'" --timeout 0.3
sleep 0.2
left=$(pgrep -f "sleep 613.25")
if [ -n "$left" ]; then not_ok "no process left behind after a timeout" "left: $left"; kill -9 $left
else ok "no process left behind after a timeout"; fi
check_fails "garbage answer" 4 "\"energy_unit\"): \"Energy is about minus five, I think.\"" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "$FAKE garbage"
check_fails "wrong gradient length" 4 "gradient has 3 triples for 4 atoms (expected 4)" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "$FAKE short"
check_fails "the first failures stop the run" 4 "the first 5 structures all failed; stopping" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "$FAKE short" --threads 1
cmp -s "$T/f.jsonl" "$T/f.orig" && ok "existing labels intact after failures" || not_ok "existing labels intact after failures"
check_fails "missing program" 4 "'no-such-program-anywhere': not found in PATH" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "no-such-program-anywhere"
check_fails "unclosed quote in the command" 2 "unclosed '" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "$FAKE 'oops"
check_fails "no command" 2 "add --potential-command" "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl"
check_fails "SMILES where a file belongs" 3 "no file named 'CCO'; it reads as SMILES, but label needs 3D structures: build them first (nadir build 'CCO' -o start.sdf)" \
  "$NADIR" label CCO -o "$T/f.jsonl" --potential-command "$FAKE"
check_fails "unreadable input" 3 "nope.xyz" \
  "$NADIR" label "$T/nope.xyz" -o "$T/f.jsonl" --potential-command "$FAKE"
check_fails "data key missing" 3 "no data item name to use as the molecule key" \
  "$NADIR" label $D/clusters.xyz -o "$T/f.jsonl" --potential-command "$FAKE" --key-from data:name
# an ion read from XYZ (no charge there): 11 electrons cannot be a singlet;
# said, and left to the program (this fake one labels it)
printf '5\nammonium\nN 0 0 0\nH 0.6 0.6 0.6\nH -0.6 -0.6 0.6\nH -0.6 0.6 -0.6\nH 0.6 -0.6 -0.6\n' > "$T/nh4.xyz"
check_fails "odd electron count as a singlet: noted, the fix named" 0 \
  "record 1: 11 electrons (charge +0) cannot have spin multiplicity 1; an XYZ file states no charge" \
  "$NADIR" label "$T/nh4.xyz" -o "$T/ion.jsonl" --potential-command "$FAKE"
printf '3\nbroken\nO 0 0 0\nH 0 0 0.1\nH 1 0 0\n' > "$T/close.xyz"
check_fails "atoms on top of each other" 3 "record 1: atoms 1 and 2 are only 0.100 A apart" \
  "$NADIR" label "$T/close.xyz" -o "$T/f.jsonl" --potential-command "$FAKE"
printf 'CCO ethanol\n' > "$T/e.smi"
"$NADIR" convert "$T/e.smi" "$T/e.sdf" 2>/dev/null
check_fails "records without coordinates" 3 "record 1: no coordinates; build 3D structures first" \
  "$NADIR" label "$T/e.sdf" -o "$T/f.jsonl" --potential-command "$FAKE"
check_fails "SMILES input" 3 "SMILES has no coordinates" \
  "$NADIR" label "$T/e.smi" -o "$T/f.jsonl" --potential-command "$FAKE"
cmp -s "$T/f.jsonl" "$T/f.orig" && ok "existing labels still intact" || not_ok "existing labels still intact"

# 5. The audit refuses a program whose gradient disagrees with its energies.
check_fails "audit refuses a wrong gradient" 5 "refused by the audit: gradient of atom" \
  "$NADIR" label $D/clusters.xyz -o "$T/w.jsonl" --potential-command "$FAKE wrong-gradient" --audit 2
[ "$(count_ids "$T/w.jsonl")" = "10 10" ] && ok "refused labels are not written" || not_ok "refused labels are not written" "$(count_ids "$T/w.jsonl")"
check_fails "audit passes a right gradient" 0 "audit of 3 structures: worst disagreement" \
  "$NADIR" label $D/clusters.xyz -o "$T/r.jsonl" --potential-command "$FAKE" --audit 3

# 6. A program that is wrong only when two atoms share a coordinate exactly
# (as the packaged reference program was seen to be): without the nudge the
# audit catches it on the planar structure, with the nudge all is well.
check_fails "audit covers the planar structure and refuses it un-nudged" 5 \
  "audit: record 1 (flat-one, 4 atoms, planar or coincident, not nudged)" \
  "$NADIR" label $D/planar-and-not.xyz -o "$T/c0.jsonl" --potential-command "$FAKE coincident" --nudge 0 --audit 2
grep -q "refused by the audit" "$T/err" && ok "un-nudged planar label refused" || not_ok "un-nudged planar label refused"
check_fails "nudged planar structure passes the audit" 0 \
  "audit: record 1 (flat-one, 4 atoms, planar or coincident, nudged)" \
  "$NADIR" label $D/planar-and-not.xyz -o "$T/c1.jsonl" --potential-command "$FAKE coincident" --audit 2
if /usr/bin/python3 - "$T/c1.jsonl" <<'EOF'
import json, sys
lines = [json.loads(l) for l in open(sys.argv[1]) if '"elements"' in l]
flat = [d for d in lines if d["key"] == "flat-one"][0]["coordinates"]
orig = [0.0, 1.21, 0.0, 0.0, 0.0, 0.0, 1.15, -0.69, 0.0, -0.94, -0.55, 0.0]
moved = [abs(a - b) for a, b in zip(flat, orig)]
assert max(moved) < 0.006 and min(moved) > 0, moved      # about 1e-3 angstrom each
assert len(set(flat[0::3])) == 4                          # no shared x any more
EOF
then ok "the nudge is small and breaks the coincidence"; else not_ok "the nudge is small and breaks the coincidence"; fi
# Seeded: the same seed gives the same nudged coordinates.
"$NADIR" label $D/planar-and-not.xyz -o "$T/c2.jsonl" --potential-command "$FAKE coincident" 2>/dev/null
cmp -s "$T/c1.jsonl" "$T/c2.jsonl" && ok "nudge and audit are reproducible" || not_ok "nudge and audit are reproducible"

# SD input: charges reach the program, keys come from a data item.
check "SD file with a charged structure" "$NADIR" label $D/charged.sdf -o "$T/sd.jsonl" \
  --potential-command "$FAKE --log $T/sd.log" --key-from data:name --tag "sd test"
if grep -qx "call 5 1 1" "$T/sd.log" && grep -qx "call 3 0 1" "$T/sd.log" \
   && grep -q '"key": "NH4+".*"charge": 1, "multiplicity": 1' "$T/sd.jsonl" \
   && grep -q '"key": "H2O".*"source": "fake-potential", "tag": "sd test"' "$T/sd.jsonl"; then
  ok "charge, multiplicity, key, source and tag carried through"
else not_ok "charge, multiplicity, key, source and tag carried through" "$(cat "$T/sd.log")"; fi

# A request and an answer far larger than a pipe's buffer (4000 atoms).
/usr/bin/python3 -c "
print(4000); print('big')
for i in range(4000): print('C', (i % 20) * 1.01 + 0.001 * i, ((i // 20) % 20) * 1.03, (i // 400) * 1.07)
" > "$T/big.xyz"
check "a 4000-atom structure through the pipes" "$NADIR" label "$T/big.xyz" -o "$T/big.jsonl" --potential-command \
  "/usr/bin/python3 -c 'import sys, json; r = json.load(sys.stdin); n = len(r[\"elements\"]); print(json.dumps({\"energy\": 1.5, \"energy_unit\": \"hartree\", \"gradient\": [[0.25, 0, -0.5]] * n, \"gradient_unit\": \"hartree/bohr\"}))'"
if /usr/bin/python3 -c '
import json, sys
d = [json.loads(l) for l in open(sys.argv[1])][1]
H = 4.3597447222071e-18 * 6.02214076e23 / 4184.0; B = 0.529177210903   # CODATA 2018
assert len(d["forces"]) == 12000 and abs(d["energy"] - 1.5 * H) < 1e-9
assert abs(d["forces"][11997] + 0.25 * H / B) < 1e-9 and abs(d["forces"][11999] - 0.5 * H / B) < 1e-9' "$T/big.jsonl"
then ok "large answer converted"; else not_ok "large answer converted"; fi

# 7. Injection through the command string does not reach a shell.
check "shell syntax is passed as words" "$NADIR" label $D/clusters.xyz -o "$T/i.jsonl" \
  --potential-command "$FAKE ok ; touch $T/injected"
[ ! -e "$T/injected" ] && ok "nothing ran through a shell" || not_ok "nothing ran through a shell"
check "help" "$NADIR" label --help
# a file that is not a dataset is never appended to (nor its tail cut)
printf 'not a dataset\nsecond line without newline' > "$T/notes.txt"
cp "$T/notes.txt" "$T/notes.orig"
check_fails "refuses to append to a non-dataset" 3 "not a dataset" "$NADIR" label $D/clusters.xyz -o "$T/notes.txt" --potential-command "$FAKE"
cmp -s "$T/notes.txt" "$T/notes.orig" && ok "the non-dataset is untouched" || not_ok "non-dataset modified"
check_fails "option named in a bad value" 2 "--nudge takes a non-negative number" "$NADIR" label $D/clusters.xyz -o "$T/z.jsonl" --potential-command "$FAKE" --nudge nan
check_fails "option named in a bad value (2)" 2 "--audit-tolerance takes a positive number" "$NADIR" label $D/clusters.xyz -o "$T/z.jsonl" --potential-command "$FAKE" --audit-tolerance -1
printf '2\n\nH 0 0 0\nH 0.8 0 0\n' > "$T/untitled.xyz"
check_fails "no usable structure: exit 3" 3 "no usable structure in" "$NADIR" label "$T/untitled.xyz" -o "$T/none.jsonl" --potential-command "$FAKE"
[ ! -e "$T/none.jsonl" ] && ok "no dataset created when nothing can be labelled" || not_ok "empty dataset created"
finish

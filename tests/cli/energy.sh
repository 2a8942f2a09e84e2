#!/bin/bash
# nadir energy end to end with a random-weight model (made by the documented
# test helper --make-random-model): table and JSON output, forces that are
# the negative gradient of the printed energies (central differences of the
# energies of displaced copies, computed here in Python), errors named.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
T="$TAP_TMP"

check "writes a random test model" "$NADIR" energy --make-random-model "$T/r.model" --elements H,C,N,O --seed 7
cat > "$T/m.xyz" <<'XYZ'
6
methanol-like
C   0.0000  0.0000  0.0000
O   1.4210  0.0200 -0.0300
H  -0.3700  1.0200  0.0400
H  -0.3600 -0.5100  0.8900
H  -0.3500 -0.5300 -0.8800
H   1.7300 -0.8900  0.0500
XYZ
check "table output" "$NADIR" energy "$T/m.xyz" --model "$T/r.model"
if grep -q "methanol-like" "$TAP_TMP/out" && grep -q "kcal/mol" "$TAP_TMP/out"; then ok "table names the record and units"
else not_ok "table names the record and units" "$(head -c 300 "$TAP_TMP/out")"; fi

# Displaced copies along coordinate (atom 2, x) by +-h, +-2h; forces from the centre.
/usr/bin/python3 - "$T/m.xyz" "$T/d.xyz" <<'PY'
import sys
lines = open(sys.argv[1]).read().splitlines()
atoms = [l.split() for l in lines[2:]]
h = 1e-4
out = []
for d in (0, h, -h, 2 * h, -2 * h):
    out.append("%d\nshift %g" % (len(atoms), d))
    for i, a in enumerate(atoms):
        x = [float(v) for v in a[1:]]
        if i == 1: x[0] += d
        out.append("%s %.10f %.10f %.10f" % (a[0], x[0], x[1], x[2]))
open(sys.argv[2], "w").write("\n".join(out) + "\n")
PY
check "json with forces" "$NADIR" energy "$T/d.xyz" --model "$T/r.model" --gradient --json
cp "$TAP_TMP/out" "$T/d.json"
if /usr/bin/python3 - "$T/d.json" <<'PY'
import json, sys
d = json.load(open(sys.argv[1]))
r = d["records"]; e = [x["energy"] for x in r]; h = 1e-4
# fourth-order central difference of the energy (common practice, no source)
fd = (8 * (e[1] - e[2]) - (e[3] - e[4])) / (12 * h)
f = r[0]["forces"][1][0]
scale = max(abs(v) for a in r[0]["forces"] for v in a)
assert abs(-fd - f) <= 1e-6 * max(abs(fd), 1e-3 * scale), (fd, f)
assert len(r[0]["member_energies"]) == d["model"]["members"] == 4
assert r[0]["energy_spread"] > 0 and r[1]["energy_vs_first_spread"] < r[1]["energy_spread"]
assert abs(sum(r[0]["member_energies"]) / 4 - r[0]["energy"]) < 1e-12 * max(1, abs(r[0]["energy"]))
PY
then ok "force = -dE/dx end to end; spreads consistent"; else not_ok "force = -dE/dx end to end; spreads consistent"; fi

printf '2\nbromine\nC 0 0 0\nBr 1.9 0 0\n' > "$T/br.xyz"
check_fails "element outside the model" 3 "atom 2 (Br): element not covered by the model" \
  "$NADIR" energy "$T/br.xyz" --model "$T/r.model"
# an ion from XYZ, read as neutral: 11 electrons, refused with the cause
printf '5\nammonium\nN 0 0 0\nH 0.6 0.6 0.6\nH -0.6 -0.6 0.6\nH -0.6 0.6 -0.6\nH 0.6 -0.6 -0.6\n' > "$T/nh4.xyz"
check_fails "odd electron count outside a closed-shell model" 3 \
  "record 1: molecule has 11 electrons, an odd number: a radical, or an ion whose charge the input does not state (XYZ files hold none" \
  "$NADIR" energy "$T/nh4.xyz" --model "$T/r.model"
cat "$T/br.xyz" "$T/m.xyz" > "$T/mix.xyz"
check_fails "some records failed" 5 "record 1" "$NADIR" energy "$T/mix.xyz" --model "$T/r.model"
# Without a bundled model next to the program or in the working directory.
mkdir -p "$T/alone/bin" && cp "$NADIR" "$T/alone/bin/nadir"
check_fails "no model" 2 "pass --model FILE" sh -c 'cd "$1" && ./bin/nadir energy "$2"' sh "$T/alone" "$T/m.xyz"
printf 'not a model\n' > "$T/bad.model"
check_fails "not a model file" 3 "not a nadir model file" "$NADIR" energy "$T/m.xyz" --model "$T/bad.model"
head -c 5000 "$T/r.model" > "$T/cut.model"
check_fails "truncated model file" 3 "truncated" "$NADIR" energy "$T/m.xyz" --model "$T/cut.model"
check_fails "missing input" 3 "nope.xyz" "$NADIR" energy "$T/nope.xyz" --model "$T/r.model"
check_fails "usage" 2 "no input file" "$NADIR" energy --model "$T/r.model"
check "help" "$NADIR" energy --help
# messages: one location prefix, the reason for a missing 3D structure, close atoms, units
printf 'CCO ethanol\nC1CC broken\n' > "$T/s.smi"
check_fails "SMILES input: no coordinates named, nadir build suggested" 3 "no 3D coordinates (none at all); nadir build" "$NADIR" energy "$T/s.smi" --model "$T/r.model"
grep -q "s.smi, record 2, line 2: SMILES" "$T/err" && ! grep -q "record 2: .*record 2" "$T/err" && ok "reader errors carry one prefix" || not_ok "doubled prefix" "$(cat "$T/err")"
printf '3\nclash\nO 0 0 0\nH 0 0 0\nH 1 0 0\n' > "$T/clash.xyz"
check_fails "coincident atoms are named" 3 "atoms 1 and 2 are only 0.000 A apart" "$NADIR" energy "$T/clash.xyz" --model "$T/r.model"
check_fails "a directory as the model" 3 "Is a directory" "$NADIR" energy "$T/m.xyz" --model "$T"
check "forces table" "$NADIR" energy "$T/m.xyz" --model "$T/r.model" --gradient
grep -q "forces in kcal/mol/angstrom" "$T/out" && ok "force unit in the table's footer" || not_ok "force unit" "$(tail -2 "$T/out")"
check "make-random-model says what it wrote" "$NADIR" energy --make-random-model "$T/r2.model"
grep -q "random-weight model written to" "$T/err" && ok "random model message" || not_ok "random model message" "$(cat "$T/err")"

# a one-member model has no spread: shown as "-" and null, not as zero uncertainty
printf '2\nhh\nH 0 0 0\nH 0.8 0 0.01\n2\nhh\nH 0 0 0\nH 0.74 0.02 0\n' > "$T/hh.xyz"
"$NADIR" label "$T/hh.xyz" -o "$T/hh.jsonl" --potential-command tests/cli/morse_potential.py --threads 1 2>/dev/null
"$NADIR" train "$T/hh.jsonl" -o "$T/one.model" --members 1 --layers 4 --epochs 1 --threads 1 --quiet >/dev/null 2>&1
check "one-member model" "$NADIR" energy "$T/hh.xyz" --model "$T/one.model" --json
/usr/bin/python3 -c "import json,sys; r=json.load(open(sys.argv[1]))['records']; assert r[0]['energy_spread'] is None and r[1]['energy_vs_first_spread'] is None" "$T/out" && ok "one member: spread null in JSON" || not_ok "one member JSON spread" "$(head -c 300 "$T/out")"
check "one-member table" "$NADIR" energy "$T/hh.xyz" --model "$T/one.model"
grep -q "no ensemble, so no spread" "$T/out" && ok "one member: the table says there is no spread" || not_ok "one member table" "$(cat "$T/out")"

# Many records outside the bundled model's size domain (it saw at most 14
# heavy atoms; this ligand has 23): the first three are noted, then one line
# says the rest are not listed, and the JSON flags every record.
check "builds a 23-heavy-atom ligand" "$NADIR" build "CC(C)Cc1ccc(cc1)C(C)C(=O)NCCN1CCOCC1 lig" -o "$T/lig.xyz"
for k in 1 2 3 4 5 6; do cat "$T/lig.xyz"; done > "$T/lig6.xyz"
check "energy of six records outside the size domain" "$NADIR" energy "$T/lig6.xyz" --json
notes=$(grep -c "outside its size domain" "$T/err"); more=$(grep -c "further records outside" "$T/err")
flags=$(/usr/bin/python3 -c "import json,sys; print(sum(r['outside_training_sizes'] for r in json.load(open(sys.argv[1]))['records']))" "$T/out")
[ "$notes" = 3 ] && [ "$more" = 1 ] && [ "$flags" = 6 ] && ok "size notes: three, then one line; JSON flags all six" \
  || not_ok "size notes: three, then one line; JSON flags all six" "notes $notes, further $more, flags $flags"
finish

#!/bin/bash
# nadir label with the reference method (GFN2-xTB, Debian package xtb)
# through tools/xtb-single-point, checked against the same method run by
# hand: the wrapper on the stored coordinates, and xtb itself on an XYZ file
# of them (its "TOTAL ENERGY" line). Conversions: CODATA 2018 (hartree
# 4.3597447222071e-18 J, N_A 6.02214076e23 /mol, bohr 0.529177210903 A,
# thermochemical calorie 4.184 J). Skipped when xtb is not installed.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
if ! command -v xtb >/dev/null 2>&1; then
  echo "ok 1 - labels match the reference method run by hand # SKIP xtb is not installed (apt-get install xtb)"
  echo "1..1"
  exit 0
fi
T="$TAP_TMP"
WRAP="$PWD/tools/xtb-single-point"
# Water and a formamide drawn flat in the xy plane with C and O on one
# vertical line (geometries invented for this test, roughly at equilibrium).
cat > "$T/in.xyz" <<'EOF'
3
water
O     0.0213   -0.0087    0.1173
H     0.0411    0.7572   -0.4692
H    -0.0335   -0.7618   -0.4587
6
formamide-flat
O     0.0000    1.2100    0.0000
C     0.0000    0.0000    0.0000
N     1.1500   -0.6900    0.0000
H    -0.9400   -0.5500    0.0000
H     2.0500   -0.2500    0.0000
H     1.1200   -1.7000    0.0000
EOF
check_fails "labels both with a passing audit" 0 "audit of 2 structures" \
  "$NADIR" label "$T/in.xyz" -o "$T/d.jsonl" --potential-command "$WRAP" --audit 2 --threads 2
cp "$T/err" "$T/label.err"
grep -q "formamide-flat, 6 atoms, planar or coincident, nudged" "$T/label.err" \
  && ok "the audit covered the flat structure, nudged" || not_ok "the audit covered the flat structure, nudged"

if /usr/bin/python3 - "$T/d.jsonl" "$WRAP" "$T" <<'EOF'
import json, os, re, subprocess, sys
path, wrap, tmp = sys.argv[1:4]
HARTREE_KCAL = 4.3597447222071e-18 * 6.02214076e23 / 4184.0   # CODATA 2018
BOHR = 0.529177210903                                          # CODATA 2018
n = 0
for line in open(path):
    d = json.loads(line)
    if "elements" not in d:
        continue
    els, x = d["elements"], d["coordinates"]
    xyz = [x[3 * i:3 * i + 3] for i in range(len(els))]
    # The wrapper by hand on the stored (nudged) coordinates.
    req = {"elements": els, "coordinates": xyz, "charge": d["charge"], "multiplicity": d["multiplicity"]}
    ans = json.loads(subprocess.run([wrap], input=json.dumps(req), capture_output=True,
                                    text=True, check=True).stdout)
    e_wrap = ans["energy"] * HARTREE_KCAL
    assert abs(e_wrap - d["energy"]) < 1e-6, (d["key"], e_wrap, d["energy"])
    for i in range(len(els)):
        for k in range(3):
            f = -ans["gradient"][i][k] * HARTREE_KCAL / BOHR
            assert abs(f - d["forces"][3 * i + k]) < 1e-6, (d["key"], i, k, f)
    # xtb itself, with the wrapper's settings, in a directory of its own.
    wd = os.path.join(tmp, "hand-%d" % n)
    os.mkdir(wd)
    with open(os.path.join(wd, "m.xyz"), "w") as f:
        f.write("%d\n\n" % len(els) + "".join("%s %.12f %.12f %.12f\n" % (e, *p) for e, p in zip(els, xyz)))
    out = subprocess.run(["xtb", "m.xyz", "--gfn", "2", "--acc", "0.1", "--chrg", "0", "--uhf", "0"],
                         cwd=wd, capture_output=True, text=True, env=dict(os.environ, OMP_NUM_THREADS="1")).stdout
    m = re.search(r"TOTAL ENERGY\s+(-?\d+\.\d+)\s+Eh", out)
    assert m, "no TOTAL ENERGY in xtb output"
    e_hand = float(m.group(1)) * HARTREE_KCAL
    assert abs(e_hand - d["energy"]) < 1e-4, (d["key"], e_hand, d["energy"])
    print("# %s: labelled %.6f kcal/mol, wrapper by hand %.6f, xtb by hand %.6f" % (d["key"], d["energy"], e_wrap, e_hand))
    n += 1
assert n == 2, n
EOF
then ok "labels match the wrapper and xtb run by hand"; else not_ok "labels match the wrapper and xtb run by hand"; fi

# The compiled wrapper (tools/xtb_single_point.c, built beside nadir) answers
# with the same doubles as the Python script, and refuses what it refuses.
WRAPC="$(dirname "$NADIR")/xtb-single-point"
if [ -x "$WRAPC" ]; then
  if /usr/bin/python3 - "$T/d.jsonl" "$WRAP" "$WRAPC" <<'EOF'
import json, subprocess, sys
path, script, compiled = sys.argv[1:4]
n = 0
for line in open(path):
    d = json.loads(line)
    if "elements" not in d:
        continue
    els, x = d["elements"], d["coordinates"]
    req = json.dumps({"elements": els, "coordinates": [x[3 * i:3 * i + 3] for i in range(len(els))],
                      "charge": 0, "multiplicity": 1})
    a, b = (json.loads(subprocess.run([w], input=req, capture_output=True, text=True, check=True).stdout)
            for w in (script, compiled))
    assert a["energy"] == b["energy"] and a["gradient"] == b["gradient"], (d["key"], a, b)
    assert (a["energy_unit"], a["gradient_unit"]) == (b["energy_unit"], b["gradient_unit"])
    n += 1
    good = req
assert n == 2, n
bad = ['not json', '{"elements": ["Xx"], "coordinates": [[0, 0, 0]]}',
       '{"elements": ["H"], "coordinates": [[0, 0, 0]]}',
       '{"elements": ["H", "H"], "coordinates": [[0, 0, 0], [0, 0, "a"]]}',
       '{"elements": ["H", "H"], "coordinates": [[0, 0, 0], [0, 0, 0.74]], "coordinate_unit": "bohr"}']
for req in bad:
    r = [subprocess.run([w], input=req, capture_output=True, text=True) for w in (script, compiled)]
    assert r[0].returncode == r[1].returncode == 1 and not r[1].stdout, (req, r[1])
    what = [x.stderr.split(":")[1].split("[")[0] for x in r]  # the reason, without the echoed input
    assert what[0] == what[1], (req, r[0].stderr, r[1].stderr)
r = subprocess.run([compiled, "--xtb", "/nonexistent/xtb"], input=good, capture_output=True, text=True)
assert r.returncode == 1 and "cannot run '/nonexistent/xtb'" in r.stderr, r
EOF
  then ok "the compiled wrapper answers the same doubles and refuses the same requests"
  else not_ok "the compiled wrapper answers the same doubles and refuses the same requests"; fi
else
  not_ok "the compiled wrapper answers the same doubles and refuses the same requests" "$WRAPC not built"
fi

# Diagnostic, not a check: the same flat structure without the nudge. With
# xtb 6.5.1 (Debian) the audit refuses it: the x gradient of C and O, which
# share x exactly, disagrees with the energies by about 12 kcal/mol/A.
"$NADIR" label "$T/in.xyz" -o "$T/raw.jsonl" --potential-command "$WRAP" --nudge 0 --audit 2 --threads 2 \
  2>&1 | grep "audit: record 2" | sed 's/^/# without the nudge: /'
finish

#!/bin/bash
# nadir modes end to end. The potential is an external program written here
# (harmonic springs and a double well, exact gradients), so the answers are
# known: an H-35Cl-like harmonic diatomic against the textbook
# nu = (1/2 pi c) sqrt(k/mu) (computed here with scipy.constants, CODATA
# 2018), a spring model of water at its exact minimum (sigma 2 found), a
# linear symmetric triatomic at a saddle (one imaginary mode, repaired to a
# minimum), animations, frozen atoms, the learned-potential path with a
# random-weight model, and errors.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
T="$TAP_TMP"
PY=/usr/bin/python3

# The external potential: terms from the JSON file named by its argument.
#   pairs: [i, j, k, r0]       k/2 (r - r0)^2, k in kcal/mol/A^2
#   wells: [a, c, b, ks, bw, q0, r0, kt]  the double well of test_repair.c:
#          ks/2 (r1 + r2 - 2 r0)^2 + bw (q^2 - q0^2)^2 + kt/2 |u1 + u2|^2, q = r1 - r2
cat > "$T/pot.py" <<'POT'
import json, math, sys
spec = json.load(open(sys.argv[1]))
req = json.load(sys.stdin)
x = req["coordinates"]
n = len(x)
g = [[0.0, 0.0, 0.0] for _ in range(n)]
e = 0.0
def sub(a, b): return [a[k] - b[k] for k in range(3)]
def norm(v): return math.sqrt(sum(c * c for c in v))
for i, j, k, r0 in spec.get("pairs", []):
    d = sub(x[i], x[j]); r = norm(d)
    e += 0.5 * k * (r - r0) ** 2
    for c in range(3):
        f = k * (r - r0) * d[c] / r
        g[i][c] += f; g[j][c] -= f
for a, cc, b, ks, bw, q0, r0, kt in spec.get("wells", []):
    d1 = sub(x[a], x[cc]); d2 = sub(x[b], x[cc]); r1 = norm(d1); r2 = norm(d2)
    u1 = [v / r1 for v in d1]; u2 = [v / r2 for v in d2]; w = [u1[k] + u2[k] for k in range(3)]
    q = r1 - r2; s = r1 + r2 - 2 * r0
    e += 0.5 * ks * s * s + bw * (q * q - q0 * q0) ** 2 + 0.5 * kt * sum(v * v for v in w)
    dq = 4 * bw * q * (q * q - q0 * q0)
    de1 = ks * s + dq; de2 = ks * s - dq
    uw1 = sum(u1[k] * w[k] for k in range(3)); uw2 = sum(u2[k] * w[k] for k in range(3))
    for c in range(3):
        g1 = de1 * u1[c] + kt * (w[c] - uw1 * u1[c]) / r1
        g2 = de2 * u2[c] + kt * (w[c] - uw2 * u2[c]) / r2
        g[a][c] += g1; g[b][c] += g2; g[cc][c] -= g1 + g2
print(json.dumps({"energy": e, "energy_unit": "kcal/mol", "gradient": g,
                  "gradient_unit": "kcal/mol/angstrom"}))
POT

# HCl: k = 516 N/m = 516 / 0.69477 kcal/mol/A^2, r0 = 1.2746 A (from memory);
# 1 kcal/mol/A^2 = 4184 / N_A / 1e-20 N/m (CODATA 2018 via scipy).
KCAL=$($PY -c "from scipy import constants as C; print(516.0 / (1000 * C.calorie / C.N_A / 1e-20))")
echo "{\"pairs\": [[0, 1, $KCAL, 1.2746]]}" > "$T/hcl.json"
cat > "$T/hcl.xyz" <<'XYZ'
2
hydrogen chloride
H   0.1000  0.2000  0.3000
Cl  0.1000  0.2000  1.5746
XYZ
POTCMD="$PY $T/pot.py $T/hcl.json"

check "help" "$NADIR" modes --help
if grep -q "usage: nadir modes" "$TAP_TMP/out" && grep -q "examples" "$TAP_TMP/out"; then ok "help text"
else not_ok "help text"; fi

check "HCl table" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD"
if grep -q "verdict             minimum" "$TAP_TMP/out" && grep -q "symmetry number       1 (found), linear" "$TAP_TMP/out"
then ok "HCl table says minimum, sigma 1, linear"; else not_ok "HCl table says minimum, sigma 1, linear" "$(head -c 600 "$TAP_TMP/out")"; fi

check "HCl json" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" --json
cp "$TAP_TMP/out" "$T/hcl.json.out"
# Textbook harmonic oscillator, masses of 1H and 35Cl (AME2020, from memory:
# 1.00782503223 and 34.968852682 u); the file gives no isotopes, so nadir
# uses standard atomic weights 1.008 and 35.45 (IUPAC 2021): use those here.
if $PY - "$T/hcl.json.out" <<'PY'
import json, math, sys
from scipy import constants as C
d = json.load(open(sys.argv[1]))
r = d["records"][0]
mu = 1.008 * 35.45 / (1.008 + 35.45)
nu = math.sqrt(516.0 / (mu * C.atomic_mass)) / (2 * math.pi * C.c * 100)
assert len(r["wavenumbers"]) == 1, r["wavenumbers"]
assert abs(r["wavenumbers"][0] - nu) < 0.05, (r["wavenumbers"][0], nu)
assert r["verdict"] == "minimum" and r["imaginary"] == 0 and r["linear"]
t = r["thermochemistry"]
assert t["symmetry_number"] == 1
# ZPE = nu / 2 in kcal/mol (h c N_A per cm^-1, CODATA 2018)
zpe = 0.5 * nu * C.h * C.c * 100 * C.N_A / 4184
assert abs(t["zero_point_energy"] - zpe) < 1e-4, (t["zero_point_energy"], zpe)
PY
then ok "HCl frequency = textbook (1/2 pi c) sqrt(k/mu), ZPE = nu/2"; else not_ok "HCl frequency = textbook (1/2 pi c) sqrt(k/mu), ZPE = nu/2"; fi

# Deuterium via the SD file's isotope field: nu(DCl)/nu(HCl) = sqrt(mu_H/mu_D).
cat > "$T/dcl.sdf" <<'SDF'
deuterium chloride
  test

  2  1  0  0  0  0  0  0  0  0999 V2000
    0.1000    0.2000    0.3000 H   0  0  0  0  0  0  0  0  0  0  0  0
    0.1000    0.2000    1.5746 Cl  0  0  0  0  0  0  0  0  0  0  0  0
  1  2  1  0  0  0  0
M  ISO  1   1   2
M  END
$$$$
SDF
check "DCl json" "$NADIR" modes "$T/dcl.sdf" --potential-command "$POTCMD" --json
if $PY - "$T/hcl.json.out" "$TAP_TMP/out" <<'PY'
import json, math, sys
h = json.load(open(sys.argv[1]))["records"][0]["wavenumbers"][0]
d = json.load(open(sys.argv[2]))["records"][0]["wavenumbers"][0]
mh = 1.008 * 35.45 / 36.458
md = 2.01410177812 * 35.45 / (2.01410177812 + 35.45)
assert abs(d / h - math.sqrt(mh / md)) < 1e-5, (d, h)
PY
then ok "isotope field: DCl frequency ratio sqrt(mu_H/mu_D)"; else not_ok "isotope field: DCl frequency ratio"; fi

# Water, springs between all three pairs with rest lengths of this geometry:
# an exact minimum, 3 vibrations, sigma 2 found.
cat > "$T/water.xyz" <<'XYZ'
3
water springs
O   0.0000  0.0000  0.1173
H   0.0000  0.7572 -0.4692
H   0.0000 -0.7572 -0.4692
XYZ
$PY - "$T/water.xyz" > "$T/water.json" <<'PY'
import json, math, sys
x = [[float(v) for v in l.split()[1:]] for l in open(sys.argv[1]).read().splitlines()[2:]]
d = lambda i, j: math.dist(x[i], x[j])
print(json.dumps({"pairs": [[0, 1, 1100.0, d(0, 1)], [0, 2, 1100.0, d(0, 2)], [1, 2, 160.0, d(1, 2)]]}))
PY
WCMD="$PY $T/pot.py $T/water.json"
check "water json and report" "$NADIR" modes "$T/water.xyz" --potential-command "$WCMD" --json --report "$T/water-report.json"
if $PY - "$TAP_TMP/out" "$T/water-report.json" <<'PY'
import json, sys
a = json.load(open(sys.argv[1])); b = json.load(open(sys.argv[2]))
assert a == b
r = a["records"][0]
assert len(r["wavenumbers"]) == 3 and min(r["wavenumbers"]) > 100, r["wavenumbers"]
assert r["rigid_motions_removed"] == 6 and not r["linear"]
assert r["thermochemistry"]["symmetry_number"] == 2
assert r["verdict"] == "minimum"
PY
then ok "water: 3 modes, 6 removed, sigma 2, report equals stdout"; else not_ok "water: 3 modes, 6 removed, sigma 2"; fi

check "animate all" "$NADIR" modes "$T/water.xyz" --potential-command "$WCMD" --animate all --animate-out "$T/anim.xyz" --frames 8
if [ "$(grep -c 'mode [0-9]* .* cm^-1 frame' "$T/anim.xyz")" = 24 ] && [ "$(grep -c '^3$' "$T/anim.xyz")" = 24 ]
then ok "animation: 3 modes x 8 frames of 3 atoms"; else not_ok "animation: 3 modes x 8 frames" "$(head -5 "$T/anim.xyz")"; fi
check "animate one mode" "$NADIR" modes "$T/water.xyz" --potential-command "$WCMD" --animate 2 --animate-out "$T/anim2.xyz" --frames 4
if [ "$(grep -c 'mode 2 ' "$T/anim2.xyz")" = 4 ]; then ok "animation of mode 2 only"; else not_ok "animation of mode 2 only"; fi
check_fails "animate a mode that does not exist" 3 "record 1 has 3 modes" \
  "$NADIR" modes "$T/water.xyz" --potential-command "$WCMD" --animate 9 --animate-out "$T/anim3.xyz"

# Linear symmetric triatomic at the saddle of the double well: one imaginary
# mode; --repair reaches a minimum with |r1 - r2| = q0.
echo '{"wells": [[0, 1, 2, 620.0, 494.0, 0.153, 1.162, 111.2]]}' > "$T/well.json"
cat > "$T/saddle.xyz" <<'XYZ'
3
double well saddle
O   0.4300  -0.2100  -0.9000
C   0.4300  -0.2100   0.2620
O   0.4300  -0.2100   1.4240
XYZ
SCMD="$PY $T/pot.py $T/well.json"
check "saddle found" "$NADIR" modes "$T/saddle.xyz" --potential-command "$SCMD" --json
if $PY -c "import json,sys; r=json.load(open(sys.argv[1]))['records'][0]; assert r['verdict']=='saddle' and r['imaginary']==1 and r['wavenumbers'][0] < -300, r" "$TAP_TMP/out"
then ok "saddle: one imaginary mode"; else not_ok "saddle: one imaginary mode"; fi
check "saddle repaired" "$NADIR" modes "$T/saddle.xyz" --potential-command "$SCMD" --repair --write "$T/fixed.xyz" --report "$T/rep.json"
if grep -q "repair              1 imaginary -> 0" "$TAP_TMP/out"
then ok "repair reported in the table"; else not_ok "repair reported in the table" "$(head -c 600 "$TAP_TMP/out")"; fi
if $PY - "$T/rep.json" "$T/fixed.xyz" <<'PY'
import json, math, sys
r = json.load(open(sys.argv[1]))["records"][0]
assert r["verdict"] == "minimum" and r["imaginary"] == 0, r
rp = r["repair"]
assert rp["imaginary_before"] == 1 and rp["imaginary_after"] == 0 and rp["repaired"] and rp["rounds"] == 1
assert rp["energy_after"] < 1e-6 < rp["energy_before"]
x = [[float(v) for v in l.split()[1:4]] for l in open(sys.argv[2]).read().splitlines()[2:5]]
q = math.dist(x[0], x[1]) - math.dist(x[2], x[1])
assert abs(abs(q) - 0.153) < 1e-3, q
PY
then ok "repair: minimum with |r1 - r2| = q0 written"; else not_ok "repair: minimum with |r1 - r2| = q0 written"; fi

# Frozen Cl: partial Hessian, 3 modes, no thermochemistry.
check "frozen atom" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" --frozen 2 --json
if $PY -c "import json,sys; r=json.load(open(sys.argv[1]))['records'][0]; assert len(r['wavenumbers'])==3 and r['rigid_motions_removed']==0 and 'thermochemistry' not in r" "$TAP_TMP/out"
then ok "frozen: partial Hessian of the free atom"; else not_ok "frozen: partial Hessian of the free atom"; fi

# Learned-potential path, random weights (a smoke test: any spectrum, right sizes).
if "$NADIR" energy --make-random-model "$T/r.model" --elements H,C,N,O,Cl --seed 3 >/dev/null 2>&1; then
  check "model path" "$NADIR" modes "$T/water.xyz" --model "$T/r.model" --json
  if $PY -c "import json,sys; r=json.load(open(sys.argv[1]))['records'][0]; assert len(r['wavenumbers'])==3" "$TAP_TMP/out"
  then ok "model path: 3 modes for water"; else not_ok "model path: 3 modes for water"; fi
else
  ok "model path # SKIP no random-model helper"; ok "model path sizes # SKIP no random-model helper"
fi

# Errors.
# Without a potential the bundled model is used; without one bundled, a usage error.
mkdir -p "$T/alone/bin" && cp "$NADIR" "$T/alone/bin/nadir"
check_fails "no potential and no bundled model" 2 "pass --model FILE" sh -c 'cd "$1" && ./bin/nadir modes "$2"' sh "$T/alone" "$T/hcl.xyz"
check_fails "two potentials" 2 "not both" "$NADIR" modes "$T/hcl.xyz" --model a --potential-command b
check_fails "animate without output" 2 "--animate needs --animate-out" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" --animate all
check_fails "bad temperature" 2 "--temperature needs a positive number" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" --temperature -3
check_fails "bad symmetry" 2 "--symmetry needs" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" --symmetry 0
check_fails "missing file" 3 "nothere.xyz" "$NADIR" modes "$T/nothere.xyz" --potential-command "$POTCMD"
echo "CCO ethanol" > "$T/e.smi"
check_fails "SMILES has no 3D coordinates" 3 "no 3D coordinates" "$NADIR" modes "$T/e.smi" --potential-command "$POTCMD"
check_fails "frozen atom out of range" 3 "outside 1..2" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" --frozen 1-3
check_fails "failing potential" 4 "record 1" "$NADIR" modes "$T/hcl.xyz" --potential-command "/bin/false"
# a structure far from a stationary point is flagged, not called a minimum;
# -o is the same as --write; failures name the file
cat > "$T/hcl-far.xyz" <<'XYZ'
2
stretched hydrogen chloride
H   0.1000  0.2000  0.3000
Cl  0.1000  0.2000  1.8000
XYZ
check "stretched HCl" "$NADIR" modes "$T/hcl-far.xyz" --potential-command "$POTCMD" -o "$T/far.sdf" --report "$T/far.json"
grep -q "not a stationary point" "$T/out" && ! grep -q "verdict  *minimum" "$T/out" && ok "stretched: not called a minimum" || not_ok "stretched verdict" "$(grep verdict "$T/out")"
grep -q "hcl-far.xyz, record 1: residual gradient" "$T/err" && ok "stretched: warning on stderr" || not_ok "stretched warning" "$(cat "$T/err")"
grep -A1 modes_verdict "$T/far.sdf" | grep -q "not stationary" && ok "-o writes the structures, verdict item says so" || not_ok "-o output" "$(cat "$T/far.sdf" 2>&1 | head -3)"
$PY -c "import json,sys; d=json.load(open(sys.argv[1])); r=d['records'][0]; assert r['stationary_point'] is False; assert d['energy_unit'] == 'kcal/mol' and d['wavenumber_unit'] == 'cm^-1'" "$T/far.json" && ok "report: stationary_point false, units named" || not_ok "report stationary_point"
check_fails "failure names the file" 4 "hcl.xyz, record 1:" "$NADIR" modes "$T/hcl.xyz" --potential-command "/bin/false"
check_fails "report path checked first" 3 "does not exist" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" --report "$T/nodir/r.json"
check_fails "-o - refused (stdout has the table)" 2 "standard output carries the table" "$NADIR" modes "$T/hcl.xyz" --potential-command "$POTCMD" -o -
# Atoms on top of each other are the input's fault: exit 3 naming them, as in energy.
printf '3\nclash\nO 0 0 0\nH 0 0 0\nH 1 0 0\n' > "$TAP_TMP/clash.xyz"
check_fails "coincident atoms: input error naming them" 3 "atoms 1 and 2 are only 0.000 A apart" \
  "$NADIR" modes "$TAP_TMP/clash.xyz" --potential-command "$PWD/tests/cli/morse_potential.py"
finish

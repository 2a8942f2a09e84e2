#!/usr/bin/python3
"""The bundled model against experiment, beside the reference method.

A model can be no more faithful to experiment than the reference data it
learned from (GFN2-xTB, Debian package `xtb`, through tools/xtb-single-point),
so each geometry check measures both at their own minima and asks:
  - the reference method: within 0.03 A and 4 degrees of experiment (a check
    of the labeller itself);
  - the model: its deviation from experiment exceeds the reference method's by
    at most 0.01 A and 1 degree, and is within 0.03 A and 4 degrees overall.
Then, with the model alone (the reference method's values are in
conformers_xtb.sh):
  - pyramidal ammonia is a minimum, planar ammonia has exactly one imaginary
    mode (the inversion), eclipsed ethane exactly one (the methyl torsion);
  - n-butane: anti lowest, gauche above it by 0.3-1.1 kcal/mol (gas-phase
    experiment about 0.67 kcal/mol: W. A. Herrebout, B. J. van der Veken,
    A. Wang, J. R. Durig, J. Phys. Chem. 99, 578, 1995; from memory);
  - methylcyclohexane: equatorial methyl below axial by 1.0-2.6 kcal/mol
    (A-value 1.74 kcal/mol: E. L. Eliel, S. H. Wilen, Stereochemistry of
    Organic Compounds, Wiley 1994; from memory).

Experimental geometries: NIST Computational Chemistry Comparison and
Benchmark Database (CCCBDB), experimental geometry listings, bond lengths in
angstrom and angles in degrees (values from memory, rounded as listed there:
water r(OH) 0.958, HOH 104.5; ammonia r(NH) 1.012, HNH 106.7; methane r(CH)
1.087; ethylene r(CC) 1.339, r(CH) 1.086, HCH 117.6; formaldehyde r(CO)
1.205, r(CH) 1.111, HCH 116.1; benzene r(CC) 1.397, r(CH) 1.084).

The model checks become known shortfalls (TAP TODO: listed, not failures)
only while the bundled model's provenance says it is a pilot; once a model
that claims its goals is bundled they must pass. The reference checks are
skipped when xtb is absent. TAP output for tests/run (ND_NADIR = program).
"""
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "helpers"))
from bundled import MODEL, NADIR, ROOT, SHORTFALL, Tap, model_is_pilot  # noqa: E402

tap = Tap()
XTB = ["--potential-command", os.path.join(ROOT, "tools", "xtb-single-point")]
RADII = {"H": 0.31, "C": 0.76, "N": 0.71, "O": 0.66, "F": 0.57, "S": 1.05, "Cl": 1.02}  # Cordero 2008

# molecule -> (SMILES, {quantity: experimental value}); a quantity "A-B" is
# the mean length of the A-B bonds, "A-B-C" the mean angle at B.
EXPERIMENT = {
    "water": ("O", {"O-H": 0.958, "H-O-H": 104.5}),
    "ammonia": ("N", {"N-H": 1.012, "H-N-H": 106.7}),
    "methane": ("C", {"C-H": 1.087}),
    "ethylene": ("C=C", {"C-C": 1.339, "C-H": 1.086, "H-C-H": 117.6}),
    "formaldehyde": ("C=O", {"C-O": 1.205, "C-H": 1.111, "H-C-H": 116.1}),
    "benzene": ("c1ccccc1", {"C-C": 1.397, "C-H": 1.084}),
}


def run(args):
    p = subprocess.run([NADIR] + args, capture_output=True, text=True)
    if p.returncode not in (0, 5):
        raise RuntimeError("nadir %s: exit %d: %s" % (" ".join(args[:2]), p.returncode, p.stderr[-400:]))
    return p.stdout


def read_xyz(path):
    lines = open(path).read().split("\n")
    n = int(lines[0])
    els, xyz = [], []
    for line in lines[2:2 + n]:
        w = line.split()
        els.append(w[0])
        xyz.append([float(v) for v in w[1:4]])
    return els, xyz


def write_xyz(path, els, xyz, title):
    with open(path, "w") as f:
        f.write("%d\n%s\n" % (len(els), title))
        for e, p in zip(els, xyz):
            f.write("%s %.6f %.6f %.6f\n" % (e, p[0], p[1], p[2]))


def dist(a, b):
    return math.sqrt(sum((a[i] - b[i]) ** 2 for i in range(3)))


def angle(a, b, c):
    u = [a[i] - b[i] for i in range(3)]
    v = [c[i] - b[i] for i in range(3)]
    cos = sum(u[i] * v[i] for i in range(3)) / (math.sqrt(sum(x * x for x in u)) * math.sqrt(sum(x * x for x in v)))
    return math.degrees(math.acos(max(-1.0, min(1.0, cos))))


def measure(els, xyz, quantity):
    n = len(els)
    bonded = [[j for j in range(n) if j != i and dist(xyz[i], xyz[j]) < 1.25 * (RADII[els[i]] + RADII[els[j]])]
              for i in range(n)]
    parts = quantity.split("-")
    vals = []
    if len(parts) == 2:
        for i in range(n):
            for j in bonded[i]:
                if i < j and sorted((els[i], els[j])) == sorted(parts):
                    vals.append(dist(xyz[i], xyz[j]))
    else:
        for b in range(n):
            if els[b] != parts[1]:
                continue
            for a in bonded[b]:
                for c in bonded[b]:
                    if a < c and sorted((els[a], els[c])) == sorted((parts[0], parts[2])):
                        vals.append(angle(xyz[a], xyz[b], xyz[c]))
    if not vals:
        raise RuntimeError("no %s in the structure" % quantity)
    return sum(vals) / len(vals)


def minimum(tmp, name, smiles, potential):
    sdf = os.path.join(tmp, name + ".sdf")
    out = os.path.join(tmp, "%s.%s.xyz" % (name, "ref" if potential == XTB else "model"))
    run(["build", "%s %s" % (smiles, name), "-o", sdf])
    run(["optimize", sdf, "-o", out] + potential)
    return read_xyz(out)


def geometry_checks(tmp, pilot, have_xtb):
    todo = SHORTFALL if pilot else None
    for name, (smiles, table) in EXPERIMENT.items():
        els_m, xyz_m = minimum(tmp, name, smiles, ["--model", MODEL])
        ref = minimum(tmp, name, smiles, XTB) if have_xtb else None
        lines, ref_ok, cmp_ok, abs_ok = [], True, True, True
        for q, exp in table.items():
            tol, slack, unit = (4.0, 1.0, "deg") if q.count("-") == 2 else (0.03, 0.01, "A")
            dm = abs(measure(els_m, xyz_m, q) - exp)
            abs_ok &= dm <= tol
            text = "%s %s: experiment %.3f, model %.3f" % (name, q, exp, measure(els_m, xyz_m, q))
            if ref:
                vr = measure(ref[0], ref[1], q)
                dr = abs(vr - exp)
                ref_ok &= dr <= tol
                cmp_ok &= dm <= dr + slack
                text += ", reference method %.3f (deviations %.3f and %.3f %s)" % (vr, dm, dr, unit)
            lines.append(text)
        detail = "\n".join(lines)
        if ref:
            tap(ref_ok, "%s: the reference method's minimum is within 0.03 A and 4 deg of experiment" % name, detail)
            tap(cmp_ok, "%s: the model deviates from experiment by at most 0.01 A and 1 deg more than "
                "the reference method" % name, todo=todo)
        tap(abs_ok, "%s: the model's minimum is within 0.03 A and 4 deg of experiment" % name,
            "" if ref else detail, todo=todo)


def verdict(path, relax):
    """The modes report's record of the one structure in path."""
    d = json.loads(run(["modes", path, "--model", MODEL, "--json"] + (["--relax"] if relax else [])))
    return d["records"][0]


def imaginary(rec):
    return int(rec["imaginary"])


def mode_checks(tmp, pilot):
    todo = SHORTFALL if pilot else None
    # pyramidal ammonia from SMILES, relaxed by modes itself
    run(["build", "N ammonia", "-o", os.path.join(tmp, "nh3.sdf")])
    rec = verdict(os.path.join(tmp, "nh3.sdf"), True)
    tap(imaginary(rec) == 0, "pyramidal ammonia is a minimum of the model",
        "imaginary modes: %d" % imaginary(rec), todo=todo)
    # planar ammonia (D3h start, exactly planar: the in-plane forces keep it so)
    h = 1.0
    planar = [[0, 0, 0]] + [[h * math.cos(2 * math.pi * k / 3), h * math.sin(2 * math.pi * k / 3), 0] for k in range(3)]
    p = os.path.join(tmp, "nh3-planar.xyz")
    write_xyz(p, ["N", "H", "H", "H"], planar, "planar ammonia")
    run(["optimize", p, "-o", p + ".min.xyz", "--model", MODEL])
    els, xyz = read_xyz(p + ".min.xyz")
    flat = max(abs(a[2]) for a in xyz) < 1e-6
    rec = verdict(p + ".min.xyz", False)
    tap(flat and imaginary(rec) == 1, "planar ammonia has exactly one imaginary mode",
        "planar after relaxation: %s; imaginary modes: %d" % (flat, imaginary(rec)), todo=todo)
    # eclipsed ethane (D3h start)
    cc, ch, hcc = 1.53, 1.09, math.radians(111.0)
    atoms, coords = ["C", "C"], [[0, 0, cc / 2], [0, 0, -cc / 2]]
    for sign in (1, -1):
        for k in range(3):
            phi = 2 * math.pi * k / 3
            r = ch * math.sin(hcc)
            atoms.append("H")
            coords.append([r * math.cos(phi), r * math.sin(phi), sign * (cc / 2 - ch * math.cos(hcc))])
    p = os.path.join(tmp, "ethane-eclipsed.xyz")
    write_xyz(p, atoms, coords, "eclipsed ethane")
    run(["optimize", p, "-o", p + ".min.xyz", "--model", MODEL])
    rec = verdict(p + ".min.xyz", False)
    tap(imaginary(rec) == 1, "eclipsed ethane has exactly one imaginary mode (the methyl torsion)",
        "imaginary modes: %d" % imaginary(rec), todo=todo)


def dihedral(p0, p1, p2, p3):
    b1 = [p1[i] - p0[i] for i in range(3)]
    b2 = [p2[i] - p1[i] for i in range(3)]
    b3 = [p3[i] - p2[i] for i in range(3)]
    cr = lambda a, b: [a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]]
    dot = lambda a, b: sum(a[i] * b[i] for i in range(3))
    n1, n2 = cr(b1, b2), cr(b2, b3)
    m1 = cr(n1, b2)
    return math.degrees(math.atan2(dot(m1, n2) / math.sqrt(dot(b2, b2)), dot(n1, n2)))


def conformers(tmp, smiles, name, tries):
    rep = os.path.join(tmp, name + ".json")
    run(["conformers", "%s %s" % (smiles, name), "--model", MODEL, "--max-tries", str(tries), "--seed", "3",
         "--report", rep, "-o", os.path.join(tmp, name + ".conf.sdf")])
    return json.load(open(rep))["molecules"][0]["conformers"]


def energy_checks(tmp, pilot):
    todo = SHORTFALL if pilot else None
    conf = conformers(tmp, "CCCC", "butane", 6)
    anti, gauche = [], []
    for c in conf:
        xyz = [a[1:] for a in c["coordinates"]]
        (anti if abs(dihedral(*xyz[:4])) > 150 else gauche).append(c["relative_energy"])
    ok = bool(anti and gauche) and min(anti) == 0.0 and 0.3 <= min(gauche) - min(anti) <= 1.1
    tap(ok, "n-butane: anti lowest, gauche above it by 0.3-1.1 kcal/mol (experiment about 0.67)",
        "anti %s, gauche %s kcal/mol" % (anti, gauche), todo=todo)
    conf = conformers(tmp, "CC1CCCCC1", "methylcyclohexane", 24)
    eq, ax = [], []
    for c in conf:
        els = [a[0] for a in c["coordinates"]]
        xyz = [a[1:] for a in c["coordinates"]]
        carbons = [i for i, e in enumerate(els) if e == "C"]
        # methyl carbon 0 on ring carbon 1; ring neighbours 2 and 6 (SMILES order)
        t = abs(dihedral(xyz[carbons[0]], xyz[carbons[1]], xyz[carbons[2]], xyz[carbons[3]]))
        chair = all(40 < abs(dihedral(*[xyz[carbons[1 + (k + j) % 6]] for j in range(4)])) < 70 for k in range(6))
        if chair:
            (eq if t > 150 else ax).append(c["relative_energy"])
    ok = bool(eq and ax) and min(eq) == 0.0 and 1.0 <= min(ax) - min(eq) <= 2.6
    tap(ok, "methylcyclohexane: equatorial methyl below axial by 1.0-2.6 kcal/mol (A-value 1.74)",
        "equatorial chairs %s, axial chairs %s kcal/mol" % (eq, ax), todo=todo)


def main():
    pilot = model_is_pilot()
    have_xtb = shutil.which("xtb") is not None
    if pilot:
        print("# the bundled model is marked as a pilot: its checks report known shortfalls (TODO)")
    if not have_xtb:
        print("# xtb not installed: the reference method's geometries are skipped")
    tmp = tempfile.mkdtemp(prefix="nd-experiment-")
    try:
        geometry_checks(tmp, pilot, have_xtb)
        mode_checks(tmp, pilot)
        energy_checks(tmp, pilot)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return tap.finish()


if __name__ == "__main__":
    sys.exit(main())

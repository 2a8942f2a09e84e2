#!/usr/bin/python3
"""The bundled model's minima of the 27 basis molecules (water, ammonia,
dichloromethane, ... of tools/molecules/basis.smi) against the reference
method's own minima of the same molecules: tests/data/basis_minima.xyz, the
lowest GFN2-xTB minimum of each (nadir optimize with xtb single points as
the potential, the relax stage of tools/make-dataset.sh). The model relaxes
each from the reference minimum (nadir modes --relax) and must keep every
covalent bond (atoms closer than 1.25 times the sum of their covalent radii,
common practice, no source; radii of B. Cordero et al., Dalton Trans. 2832,
2008, from memory) within 0.03 A of the reference's (the overall margin of
the experiment checks of model_experiment.py), the median deviation within
0.01 A, and each minimum must be a true minimum (no imaginary mode).

Why: a model trained with the normal-mode displacements of these molecules
fitted the held-out set better but stretched dichloromethane's C-H bonds to
1.171 A (reference 1.089), a defect no other check saw. The cause was the
training split, which had held out dichloromethane (the only CCl2 carbon of
the data) among 4 of the basis molecules; tools/train-model.sh now trains on
every basis molecule (nadir train --always-train). So this is a check of the
fit at molecules the model trained on, not of how it carries over to new
ones (model_accuracy.py measures that).

Imaginary modes are known shortfalls (TAP TODO) while the bundled model is a
pilot; the bonds must hold. TAP output for tests/run."""
import json
import os
import subprocess
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "helpers"))
from bundled import MODEL, NADIR, ROOT, SHORTFALL, Tap, model_is_pilot  # noqa: E402

REFERENCE = os.path.join(ROOT, "tests", "data", "basis_minima.xyz")
RADII = {"H": 0.31, "C": 0.76, "N": 0.71, "O": 0.66, "F": 0.57, "S": 1.05, "Cl": 1.02}
tap = Tap()


def read_xyz(path):
    out, lines, i = [], open(path).read().split("\n"), 0
    while i < len(lines) and lines[i].strip():
        n = int(lines[i])
        rows = [ln.split() for ln in lines[i + 2:i + 2 + n]]
        out.append((lines[i + 1].split()[0], [r[0] for r in rows], np.array([[float(v) for v in r[1:4]] for r in rows])))
        i += 2 + n
    return out


def bonds(els, x):
    return [(i, j) for i in range(len(els)) for j in range(i + 1, len(els))
            if np.linalg.norm(x[i] - x[j]) < 1.25 * (RADII[els[i]] + RADII[els[j]])]


def main():
    ref = read_xyz(REFERENCE)
    tap(len(ref) == 27, "27 reference minima in tests/data/basis_minima.xyz", "%d found" % len(ref))
    out = os.path.join(os.environ.get("TMPDIR", "/tmp"), "nd-basis-minima-%d.xyz" % os.getpid())
    r = subprocess.run([NADIR, "modes", REFERENCE, "--model", MODEL, "--relax", "--json", "-o", out],
                       capture_output=True, text=True)
    try:
        doc = json.loads(r.stdout)
        got = read_xyz(out)
    except (ValueError, OSError) as e:
        tap(False, "nadir modes --relax on the basis minima", "exit %d: %s %s" % (r.returncode, e, r.stderr[-300:]))
        return tap.finish()
    finally:
        if os.path.exists(out):
            os.remove(out)
    tap(r.returncode == 0 and len(got) == len(ref) and not doc["failures"],
        "nadir modes --relax analyses every basis molecule", "exit %d, %d structures" % (r.returncode, len(got)))
    devs, worst = [], []
    for (key, els, xr), (key2, els2, xm) in zip(ref, got):
        if key != key2 or els != els2:
            tap(False, "model minima in the reference's order", "%s against %s" % (key2, key))
            return tap.finish()
        d = [(abs(np.linalg.norm(xm[i] - xm[j]) - np.linalg.norm(xr[i] - xr[j])), "%s %s%d-%s%d" % (key, els[i], i + 1, els[j], j + 1))
             for i, j in bonds(els, xr)]
        devs += [v for v, _ in d]
        worst.append(max(d))
    worst.sort(reverse=True)
    tap(worst[0][0] <= 0.03, "every covalent bond within 0.03 A of the reference method's minimum",
        "largest deviations: " + ", ".join("%s %.3f A" % (w, v) for v, w in worst[:4]))
    tap(float(np.median(devs)) <= 0.01, "median bond deviation at most 0.01 A",
        "median %.4f A over %d bonds" % (float(np.median(devs)), len(devs)))
    saddles = ["%s (%d, lowest %.0f cm^-1)" % (rec["molecule"]["title"], rec["imaginary"], min(rec["wavenumbers"]))
               for rec in doc["records"] if rec["imaginary"]]
    tap(not saddles, "every model minimum is a true minimum (no imaginary mode)",
        "imaginary modes: " + (", ".join(saddles) or "none"), todo=SHORTFALL if model_is_pilot() else None)
    return tap.finish()


if __name__ == "__main__":
    sys.exit(main())

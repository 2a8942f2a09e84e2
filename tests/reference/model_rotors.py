#!/usr/bin/python3
"""Hydrogen rotors of the bundled model against the reference method.

The O-H of a carboxylic acid or a phenol and the N-H2 of an amide decide
hydrogen-bond patterns, so a conformer search that gets their torsion wrong
reports shapes that are not there. For each molecule below, a relaxed
torsion scan of the rotor in steps of 30 degrees (nadir optimize --scan: the
torsion of one hydrogen held, the rest relaxed, each angle starting from the
last; 0-180 degrees for an O-H, 0-90 for an N-H2, whose relaxation may carry
the other hydrogen past the held one beyond 90) is run twice from the same built structure: on the model and
on the reference method (GFN2-xTB, Debian package `xtb`, through
tools/xtb-single-point). Each profile is taken relative to its own lowest
point. The model passes when its profile is within 1.0 kcal/mol of the
reference's on average and 2.0 at worst (twice and four times the
conformer-energy goal of issue 10; the points lie up to about 15 kcal/mol
up) and its barrier (highest point) is within 25% of the reference's (our
own margin, no source).

While the bundled model's provenance says it is a pilot, a failed model
check is a known shortfall (TAP TODO). Skipped without xtb. TAP output for
tests/run (ND_NADIR = program).
"""
import json
import os
import shutil
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "helpers"))
from bundled import MODEL, NADIR, ROOT, SHORTFALL, Tap, model_is_pilot  # noqa: E402

tap = Tap()
XTB = ["--potential-command", os.path.join(ROOT, "tools", "xtb-single-point")]

# name -> (SMILES, the scanned torsion I,J,K,L, 1-based in nadir build's
# order: the heavy atoms as written, then each one's hydrogens; the last
# angle of the scan)
ROTORS = {
    "acetic acid O-H": ("CC(=O)O", "3,2,4,8", 180),
    "phenol O-H": ("Oc1ccccc1", "3,2,1,8", 180),
    "acetamide N-H2": ("CC(N)=O", "4,2,3,8", 90),
}


def run(args):
    p = subprocess.run([NADIR] + args, capture_output=True, text=True)
    if p.returncode not in (0, 5):
        raise RuntimeError("nadir %s: exit %d\n%s" % (" ".join(args[:2]), p.returncode, p.stderr))
    return p


def profile(tmp, tag, start, torsion, last, potential):
    report = os.path.join(tmp, tag + ".json")
    run(["optimize", start, "--scan", torsion, "--scan-range", "0,%d,30" % last, "--report", report,
         "-o", os.path.join(tmp, tag + ".sdf")] + potential)
    with open(report) as f:
        rep = json.load(f)
    points = rep["records"][0]["scan"]["points"]
    energies = [p["energy"] for p in points]
    low = min(energies)
    return [p["target"] for p in points], [e - low for e in energies]


def main():
    if shutil.which("xtb") is None:
        print("1..0 # SKIP xtb not installed")
        return 0
    pilot = model_is_pilot()
    todo = SHORTFALL if pilot else None
    tmp = tempfile.mkdtemp(prefix="nd-rotors-")
    try:
        for name, (smiles, torsion, last) in ROTORS.items():
            start = os.path.join(tmp, "start.sdf")
            run(["build", smiles + " " + name.split()[0], "-o", start, "--seed", "1"])
            angles, ref = profile(tmp, "ref", start, torsion, last, XTB)
            _, mod = profile(tmp, "model", start, torsion, last, ["--model", MODEL])
            dev = [abs(m - r) for m, r in zip(mod, ref)]
            mae, worst = sum(dev) / len(dev), max(dev)
            table = "angle  reference  model (kcal/mol, relative to each profile's lowest)\n" + \
                "\n".join("%5.0f  %9.2f  %5.2f" % t for t in zip(angles, ref, mod))
            tap(len(ref) == last // 30 + 1 and max(ref) > 0.5,
                "%s: the reference's scan has all %d angles and a barrier" % (name, last // 30 + 1), table)
            tap(len(mod) == len(ref) and mae <= 1.0 and worst <= 2.0,
                "%s: model profile within 1.0 kcal/mol on average, 2.0 at worst" % name,
                "%d of %d angles; mean %.2f, worst %.2f" % (len(mod), len(ref), mae, worst), todo)
            tap(abs(max(mod) - max(ref)) <= 0.25 * max(ref), "%s: model barrier within 25%% of the reference's"
                % name, "model %.2f, reference %.2f kcal/mol" % (max(mod), max(ref)), todo)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return tap.finish()


if __name__ == "__main__":
    sys.exit(main())

#!/usr/bin/python3
"""Normal-mode displacements of reference minima, for the basis set.

  modes.py lowest RELAXDIR OUT.xyz
      the lowest minimum of every molecule among RELAXDIR/chunk*.min.xyz
      (energies from the chunk's report.json), title = molecule key
  modes.py displace MINIMA.xyz ANIMATION.xyz MODES.json OUT.xyz
      [--energies 0.3,1.2,3] [--samples 24] [--temperatures 300,900]
      [--largest 0.35] [--seed 11]

ANIMATION.xyz and MODES.json come from `nadir modes MINIMA.xyz
--potential-command REF --animate all --frames 4 --json` (frame 2 of each
mode is the minimum moved by the mode's direction, the largest atom
displacement being the --amplitude; MODES.json holds each mode's force
constant k for a displacement of unit Cartesian length). Written, titled
with the molecule key:
  - every mode alone, both ways, at each harmonic energy E of --energies
    (Cartesian length d = sqrt(2E/k));
  - --samples structures per molecule and temperature with every mode at
    once, each mode's length drawn from a Gaussian of variance kB T / k
    (classical harmonic sampling).
No atom moves more than --largest angstrom in one mode (soft modes of a few
tens of cm^-1 would otherwise swing whole groups).

Why: the dataset's minima and their Gaussian shakes show the model where a
minimum is, but not the curvature along each vibration; the model placed
ethylene's H-C-H angle 1 degree from the reference's own (a check of
tests/reference/model_experiment.py), and the free energies nadir ranks by
rest on these curvatures.
"""
import argparse
import glob
import json
import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.dont_write_bytecode = True  # no __pycache__ beside the tools
sys.path.insert(0, HERE)
from structures import read_xyz, rng_for, write_atomic, xyz_text  # noqa: E402

KB = 0.0019872043  # Boltzmann constant, kcal/(mol K) (CODATA 2018: R = 8.314462618 J/(mol K))


def die(msg):
    sys.exit("modes.py: " + msg)


def cmd_lowest(a):
    chunks = sorted(glob.glob(os.path.join(a.relaxdir, "chunk*.min.xyz")))
    if not chunks:
        die("%s: no chunk*.min.xyz files" % a.relaxdir)
    best = {}
    order = []
    for path in chunks:
        report = path[:-len(".min.xyz")] + ".report.json"
        if not os.path.exists(report):
            die("%s: no %s beside it" % (path, os.path.basename(report)))
        recs = json.load(open(report))["records"]
        frames = read_xyz(path)
        if len(frames) != len(recs):
            die("%s: %d structures but %d records in %s" % (path, len(frames), len(recs), report))
        for (title, els, xyz), r in zip(frames, recs):
            if not r.get("converged"):
                continue
            key = title.split()[0]
            if key not in best:
                order.append(key)
            if key not in best or r["energy"] < best[key][0]:
                best[key] = (r["energy"], els, xyz)
    write_atomic(a.out, "".join(xyz_text(k, best[k][1], best[k][2]) for k in order))
    print("modes.py: lowest minima of %d molecules to %s" % (len(order), a.out), file=sys.stderr)


def mode_directions(animation):
    """{record number: [(unit Cartesian direction (n,3))...]} from a 4-frame
    animation (frame 1 the minimum, frame 2 minimum + amplitude * mode)."""
    out = {}
    frames = read_xyz(animation)
    by = {}
    for title, els, xyz in frames:
        w = title.split()
        if len(w) < 8 or w[0] != "record" or w[2] != "mode" or w[6] != "frame":
            die("%s: frame title '%s' is not a nadir modes animation title" % (animation, title))
        f, nf = w[7].split("/")
        if nf != "4":
            die("%s: animate with --frames 4 (found %s frames per mode)" % (animation, nf))
        by[(int(w[1]), int(w[3]), int(f))] = xyz
    for (rec, mode, f) in sorted(by):
        if f != 1:
            continue
        v = by[(rec, mode, 2)] - by[(rec, mode, 1)]
        out.setdefault(rec, []).append(v / np.linalg.norm(v))
    return out


def cmd_displace(a):
    minima = read_xyz(a.minima)
    doc = json.load(open(a.modes_json))
    dirs = mode_directions(a.animation)
    energies = [float(x) for x in a.energies.split(",") if x]
    temps = [float(x) for x in a.temperatures.split(",") if x]
    out, written, skipped = [], 0, 0
    for r in doc["records"]:
        title, els, x0 = minima[r["record"] - 1]
        key = title.split()[0]
        ks = r["force_constants_kcal_per_mol_angstrom2"]
        vs = dirs.get(r["record"], [])
        if r["imaginary"] or len(vs) != len(ks):
            print("modes.py: %s: %d imaginary modes, %d directions for %d modes; skipped"
                  % (key, r["imaginary"], len(vs), len(ks)), file=sys.stderr)
            skipped += 1
            continue

        def cap(v, d):
            big = np.abs(d) * np.max(np.linalg.norm(v, axis=1))
            return d if big <= a.largest else np.sign(d) * a.largest / np.max(np.linalg.norm(v, axis=1))

        for k, v in zip(ks, vs):
            for e in energies:
                d = cap(v, np.sqrt(2 * e / k))
                for s in (1, -1):
                    out.append(xyz_text(key, els, x0 + s * d * v))
                    written += 1
        for t in temps:
            rng = rng_for(a.seed, key, int(t), "modes")
            for _ in range(a.samples):
                x = x0.copy()
                for k, v in zip(ks, vs):
                    x += cap(v, rng.normal(0.0, np.sqrt(KB * t / k))) * v
                out.append(xyz_text(key, els, x))
                written += 1
    write_atomic(a.out, "".join(out))
    print("modes.py: %d structures of %d molecules to %s (%d skipped)"
          % (written, len(doc["records"]) - skipped, a.out, skipped), file=sys.stderr)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    sub = ap.add_subparsers(dest="cmd", required=True)
    lo = sub.add_parser("lowest")
    lo.add_argument("relaxdir")
    lo.add_argument("out")
    di = sub.add_parser("displace")
    di.add_argument("minima")
    di.add_argument("animation")
    di.add_argument("modes_json")
    di.add_argument("out")
    di.add_argument("--energies", default="0.3,1.2,3")
    di.add_argument("--samples", type=int, default=24)
    di.add_argument("--temperatures", default="300,900")
    di.add_argument("--largest", type=float, default=0.35)
    di.add_argument("--seed", type=int, default=11)
    a = ap.parse_args()
    if a.cmd == "displace" and not (a.largest > 0 and a.samples >= 0):
        die("--largest must be positive and --samples at least 0")
    (cmd_lowest if a.cmd == "lowest" else cmd_displace)(a)


if __name__ == "__main__":
    main()

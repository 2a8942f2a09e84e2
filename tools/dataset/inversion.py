#!/usr/bin/python3
"""Umbrella inversion paths of three-coordinate nitrogen, for the basis set.

  inversion.py IN.xyz OUT.xyz [--steps 13] [--shakes 4] [--sigma 0.03] [--seed 7]
                              [--bends 0] [--bend-angle 15]

For every structure of IN.xyz (relaxed molecules, title = molecule name) the
first nitrogen with three neighbours is carried from its own pyramid through
the planar shape to the inverted one: each substituent keeps its bond length
and its direction's part in the plane of the three, while the part along
the plane's normal is scaled by t = 1 ... -1 (steps values); a substituent
turns as a rigid group about the nitrogen (a methyl with its hydrogens). Each frame is written
once as is and `shakes` times with Gaussian noise of sigma angstrom on every
coordinate, titled with the molecule name (its key in the dataset).

Why: the training set's molecules keep their amines pyramidal, so the model
had never seen planar ammonia and placed it far too low, with three
imaginary modes instead of the one of the inversion saddle (a check of
tests/reference/model_experiment.py). The path and its neighbourhood teach
the barrier's shape.

With --bends N, only the planar frames are written instead (the middle step
of the path), N times per molecule, each substituent turned as a rigid group
about the plane's normal through the nitrogen by its own angle, uniform in
[-bend-angle, bend-angle] degrees: the in-plane bends. Why: trained on the
paths alone, the model still gave planar ammonia three imaginary modes, the
in-plane e' bends at -620 cm^-1 besides the inversion; the path's small
Gaussian shakes move the hydrogens too little to show that curvature.
"""
import argparse
import os
import random
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.dont_write_bytecode = True  # no __pycache__ beside the tools
sys.path.insert(0, HERE)
from active import bond_set  # noqa: E402
from structures import read_xyz  # noqa: E402


def axis_rotation(k, sn, cs):
    """Rotation matrix about unit axis k by the angle of sine sn and cosine
    cs (Rodrigues' formula)."""
    K = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + sn * K + (1 - cs) * K @ K


def rotation(a, b):
    """Rotation matrix turning unit vector a into unit vector b about their
    common normal."""
    k = np.cross(a, b)
    sn, cs = np.linalg.norm(k), float(np.dot(a, b))
    if sn < 1e-12:
        return np.eye(3)
    return axis_rotation(k / sn, sn, cs)


def group(nb, start, block):
    """Atoms reached from start without passing through block."""
    seen, todo = {start}, [start]
    while todo:
        a = todo.pop()
        for b in nb[a]:
            if b != block and b not in seen:
                seen.add(b)
                todo.append(b)
    return seen


def nitrogen(els, xyz):
    """The first nitrogen with three neighbours: its index, the vectors to
    its neighbours, the unit normal of their plane (either sign) and the
    rigid group behind each neighbour; None when there is none."""
    nb = [[] for _ in els]
    for i, j in bond_set(els, xyz):
        nb[i].append(j)
        nb[j].append(i)
    centre = next((i for i, el in enumerate(els) if el == "N" and len(nb[i]) == 3), None)
    if centre is None:
        return None
    u = [xyz[s] - xyz[centre] for s in nb[centre]]
    normal = np.cross(u[1] - u[0], u[2] - u[0])
    normal /= np.linalg.norm(normal)
    return centre, u, normal, [group(nb, s, centre) for s in nb[centre]]


def path(els, xyz, steps):
    found = nitrogen(els, xyz)
    if found is None:
        return None
    centre, u, normal, groups = found
    xn = xyz[centre]
    if np.dot(normal, u[0] + u[1] + u[2]) < 0:
        normal = -normal
    if any(centre in g for g in groups) or len(set().union(*groups)) != sum(map(len, groups)):
        return None  # a ring through the nitrogen: no rigid groups
    frames = []
    for q in range(steps):
        t = 1 - 2 * q / (steps - 1)
        x = xyz.copy()
        for v, g in zip(u, groups):
            h = np.dot(v, normal)
            w = v - h * normal + t * h * normal
            rot = rotation(v / np.linalg.norm(v), w / np.linalg.norm(w))
            for a in g:
                x[a] = xn + rot @ (xyz[a] - xn)
        frames.append(x)
    return frames


def bends(els, xyz, steps, count, max_deg, rng):
    """count in-plane bends of the planar frame of the path (None when the
    molecule has no suitable nitrogen)."""
    frames = path(els, xyz, steps)
    if frames is None:
        return None
    flat = frames[(steps - 1) // 2]
    centre, _, normal, groups = nitrogen(els, flat)
    xn = flat[centre]
    out = []
    for _ in range(count):
        x = flat.copy()
        for g in groups:
            ang = np.radians(rng.uniform(-max_deg, max_deg))
            rot = axis_rotation(normal, np.sin(ang), np.cos(ang))
            for a in g:
                x[a] = xn + rot @ (flat[a] - xn)
        out.append(x)
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("inp")
    ap.add_argument("out")
    ap.add_argument("--steps", type=int, default=13)
    ap.add_argument("--shakes", type=int, default=4)
    ap.add_argument("--sigma", type=float, default=0.03)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--bends", type=int, default=0)
    ap.add_argument("--bend-angle", type=float, default=15.0)
    a = ap.parse_args()
    if a.steps < 3 or a.steps % 2 == 0:
        sys.exit("inversion.py: --steps must be odd and at least 3 (the middle step is the planar one)")
    if a.bends < 0 or not 0 < a.bend_angle <= 60:
        sys.exit("inversion.py: --bends must be at least 0 and --bend-angle in (0, 60] degrees")
    rng = random.Random(a.seed)
    written = 0
    with open(a.out, "w") as out:
        for title, els, xyz in read_xyz(a.inp):
            if a.bends:
                frames = bends(els, xyz, a.steps, a.bends, a.bend_angle, rng)
            else:
                frames = path(els, xyz, a.steps)
            if frames is None:
                print("inversion.py: %s: no three-coordinate nitrogen outside a ring, skipped" % title,
                      file=sys.stderr)
                continue
            for x in frames:
                for s in range(1 if a.bends else a.shakes + 1):
                    out.write("%d\n%s\n" % (len(els), title))
                    for el, c in zip(els, x):
                        d = [rng.gauss(0, a.sigma) if s else 0.0 for _ in range(3)]
                        out.write("%-2s %.6f %.6f %.6f\n" % (el, c[0] + d[0], c[1] + d[1], c[2] + d[2]))
                    written += 1
    print("inversion.py: %d structures to %s" % (written, a.out), file=sys.stderr)


if __name__ == "__main__":
    main()

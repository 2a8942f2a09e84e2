#!/usr/bin/python3
"""Umbrella inversion paths of three-coordinate nitrogen, for the basis set.

  inversion.py IN.xyz OUT.xyz [--steps 13] [--shakes 4] [--sigma 0.03] [--seed 7]

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
"""
import argparse
import math
import random
import sys

RAD = {"H": 0.31, "C": 0.76, "N": 0.71, "O": 0.66, "F": 0.57, "S": 1.05, "Cl": 1.02}


def read_xyz(path):
    frames = []
    with open(path) as f:
        lines = f.read().splitlines()
    i = 0
    while i < len(lines):
        if not lines[i].strip():
            i += 1
            continue
        n = int(lines[i])
        title = lines[i + 1].strip()
        atoms = []
        for ln in lines[i + 2:i + 2 + n]:
            w = ln.split()
            atoms.append((w[0], [float(w[1]), float(w[2]), float(w[3])]))
        frames.append((title, atoms))
        i += 2 + n
    return frames


def sub(a, b):
    return [a[0] - b[0], a[1] - b[1], a[2] - b[2]]


def dot(a, b):
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2]


def cross(a, b):
    return [a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]]


def norm(a):
    return math.sqrt(dot(a, a))


def rotation(a, b):
    """Rotation matrix (rows) turning unit vector a into unit vector b about
    their common normal (Rodrigues' formula)."""
    k = cross(a, b)
    sn, cs = norm(k), dot(a, b)
    if sn < 1e-12:
        return [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]
    k = [c / sn for c in k]
    K = [[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]]
    KK = [[sum(K[i][m] * K[m][j] for m in range(3)) for j in range(3)] for i in range(3)]
    return [[(1.0 if i == j else 0.0) + sn * K[i][j] + (1 - cs) * KK[i][j] for j in range(3)]
            for i in range(3)]


def bonds(atoms):
    n = len(atoms)
    nb = [[] for _ in range(n)]
    for i in range(n):
        for j in range(i + 1, n):
            lim = 1.25 * (RAD[atoms[i][0]] + RAD[atoms[j][0]])
            if norm(sub(atoms[i][1], atoms[j][1])) < lim:
                nb[i].append(j)
                nb[j].append(i)
    return nb


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


def path(atoms, steps):
    nb = bonds(atoms)
    centre = next((i for i, (el, _) in enumerate(atoms) if el == "N" and len(nb[i]) == 3), None)
    if centre is None:
        return None
    xn = atoms[centre][1]
    subs = nb[centre]
    u = [sub(atoms[s][1], xn) for s in subs]
    normal = cross(sub(u[1], u[0]), sub(u[2], u[0]))
    normal = [c / norm(normal) for c in normal]
    if dot(normal, [u[0][k] + u[1][k] + u[2][k] for k in range(3)]) < 0:
        normal = [-c for c in normal]
    groups = [group(nb, s, centre) for s in subs]
    if any(centre in g for g in groups) or len(set().union(*groups)) != sum(map(len, groups)):
        return None  # a ring through the nitrogen: no rigid groups
    frames = []
    for q in range(steps):
        t = 1 - 2 * q / (steps - 1)
        x = [list(c) for _, c in atoms]
        for s, v, g in zip(subs, u, groups):
            length = norm(v)
            h = dot(v, normal)
            inplane = [v[k] - h * normal[k] for k in range(3)]
            w = [inplane[k] + t * h * normal[k] for k in range(3)]
            w = [c / norm(w) for c in w]
            rot = rotation([c / length for c in v], w)
            for a in g:
                r = sub(atoms[a][1], xn)
                x[a] = [xn[k] + dot(rot[k], r) for k in range(3)]
        frames.append(x)
    return frames


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("inp")
    ap.add_argument("out")
    ap.add_argument("--steps", type=int, default=13)
    ap.add_argument("--shakes", type=int, default=4)
    ap.add_argument("--sigma", type=float, default=0.03)
    ap.add_argument("--seed", type=int, default=7)
    a = ap.parse_args()
    if a.steps < 2:
        sys.exit("inversion.py: --steps must be at least 2")
    rng = random.Random(a.seed)
    written = 0
    with open(a.out, "w") as out:
        for title, atoms in read_xyz(a.inp):
            frames = path(atoms, a.steps)
            if frames is None:
                print("inversion.py: %s: no three-coordinate nitrogen outside a ring, skipped" % title,
                      file=sys.stderr)
                continue
            for x in frames:
                for s in range(a.shakes + 1):
                    out.write("%d\n%s\n" % (len(atoms), title))
                    for (el, _), c in zip(atoms, x):
                        d = [rng.gauss(0, a.sigma) if s else 0.0 for _ in range(3)]
                        out.write("%-2s %.6f %.6f %.6f\n" % (el, c[0] + d[0], c[1] + d[1], c[2] + d[2]))
                    written += 1
    print("inversion.py: %d structures to %s" % (written, a.out), file=sys.stderr)


if __name__ == "__main__":
    main()

#!/usr/bin/python3
"""tools/dataset/inversion.py (umbrella inversion paths of the basis set)
against geometry with a known answer: ammonia and methylamine from a
hand-built pyramid (N-H 1.012 A, H-N-H 106.7 degrees, near the experimental
ammonia geometry, from memory). On each path every bond length and every
distance inside a substituent group is kept; the middle frame has the
nitrogen in the plane of its three neighbours (ammonia: H-N-H 120 degrees,
D3h); the last frame is the mirror image of the first through that plane
(height of the nitrogen reversed); displaced copies differ from their frame
by about sigma; a nitrogen in a ring and a molecule without one are skipped
with a message. With --bends, the planar frames are turned in plane: every
atom stays in the plane, bond lengths and group shapes are kept, the
H-N-H angles of ammonia leave 120 degrees (they sum to 360 in a plane) by
up to twice the bend angle. No reference method needed. TAP output for
tests/run."""
import math
import os
import subprocess
import sys
import tempfile

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "helpers"))
from xyzfiles import read_xyz, write_xyz  # noqa: E402
from bundled import ROOT, Tap  # noqa: E402

TOOL = os.path.join(ROOT, "tools", "dataset", "inversion.py")
tap = Tap()


def pyramid(r=1.012, angle=106.7):
    """N at the apex, three H below it, C3v, given N-H and H-N-H."""
    a = math.radians(angle)
    # the H-H distance fixes the radius of the H circle, the bond the height
    hh = 2 * r * math.sin(a / 2)
    rho = hh / math.sqrt(3)
    h = math.sqrt(r * r - rho * rho)
    hs = [[rho * math.cos(k * 2 * math.pi / 3), rho * math.sin(k * 2 * math.pi / 3), -h] for k in range(3)]
    return [("N", [0.0, 0.0, 0.0])] + [("H", x) for x in hs]


def methylamine():
    """Ammonia with one H replaced by a methyl along the same bond."""
    atoms = pyramid()
    c = np.array(atoms[1][1]) / np.linalg.norm(atoms[1][1]) * 1.47
    u = c / np.linalg.norm(c)
    p = np.cross(u, [0, 0, 1.0])
    p /= np.linalg.norm(p)
    q = np.cross(u, p)
    hs = []
    for k in range(3):
        t = k * 2 * math.pi / 3
        d = 0.36 * u + 1.03 * (math.cos(t) * p + math.sin(t) * q)
        hs.append(("H", list(c + d)))
    return [atoms[0], ("C", list(c)), atoms[2], atoms[3]] + hs


def height(x, centre, nbrs):
    """Signed distance of the centre from the plane of its neighbours."""
    a, b, c = (x[j] for j in nbrs)
    n = np.cross(b - a, c - a)
    return float(np.dot(x[centre] - a, n / np.linalg.norm(n)))


def main():
    steps, shakes = 13, 4
    with tempfile.TemporaryDirectory() as tmp:
        src, out = os.path.join(tmp, "in.xyz"), os.path.join(tmp, "out.xyz")
        aziridine = [("N", [0, 0, 0]), ("C", [0.74, 0, -1.2]), ("C", [-0.74, 0, -1.2]),
                     ("H", [0, 0.95, 0.3])]
        write_xyz(src, [("ammonia", pyramid()), ("methylamine", methylamine()),
                        ("aziridine-core", aziridine), ("methane", [("C", [0, 0, 0]), ("H", [0, 0, 1.09])])])
        r = subprocess.run([sys.executable, TOOL, src, out, "--steps", str(steps), "--shakes", str(shakes),
                            "--sigma", "0.03", "--seed", "3"], capture_output=True, text=True)
        tap(r.returncode == 0, "inversion.py runs", r.stderr.strip()[-300:])
        frames = read_xyz(out) if os.path.exists(out) else []
    per = steps * (shakes + 1)
    tap(len(frames) == 2 * per, "13 steps x 5 structures for each amine, none for the others",
        "%d structures" % len(frames))
    tap("aziridine-core: no three-coordinate nitrogen outside a ring" in r.stderr
        and "methane: no three-coordinate nitrogen" in r.stderr, "ring nitrogen and no nitrogen skipped with a message")
    if len(frames) != 2 * per:
        return tap.finish()
    tap(all(t == "ammonia" for t, _ in frames[:per]) and all(t == "methylamine" for t, _ in frames[per:]),
        "titles are the molecule names (their dataset keys)")
    for name, first, groups in (("ammonia", 0, [[1], [2], [3]]), ("methylamine", per, [[1, 4, 5, 6], [2], [3]])):
        path = [frames[first + q * (shakes + 1)][1] for q in range(steps)]
        x0 = path[0]
        nbrs = [g[0] for g in groups]
        worst = 0.0
        for x in path:
            for g in groups:
                for a in [0] + g:
                    for b in g:
                        worst = max(worst, abs(np.linalg.norm(x[a] - x[b]) - np.linalg.norm(x0[a] - x0[b])))
        tap(worst < 5e-6, "%s: bond lengths and group shapes kept along the path (file holds 1e-6 A)" % name,
            "worst change %.2e A" % worst)
        h0, hm, hl = (height(path[q], 0, nbrs) for q in (0, steps // 2, steps - 1))
        tap(abs(hm) < 1e-6, "%s: the middle frame is planar at nitrogen" % name, "height %.2e A" % hm)
        tap(abs(h0) > 0.3 and abs(hl + h0) < 1e-6, "%s: the last frame is the first inverted" % name,
            "heights %.4f and %.4f A" % (h0, hl))
        if name == "ammonia":
            x = path[steps // 2]
            ang = [math.degrees(math.acos(np.dot(x[i] - x[0], x[j] - x[0]) /
                                          (np.linalg.norm(x[i] - x[0]) * np.linalg.norm(x[j] - x[0]))))
                   for i, j in ((1, 2), (1, 3), (2, 3))]
            tap(max(abs(a - 120) for a in ang) < 1e-4, "ammonia: planar frame has H-N-H 120 degrees (D3h)",
                " ".join("%.5f" % a for a in ang))
        shake = [frames[first + s][1] - frames[first][1] for s in range(1, shakes + 1)]
        rms = float(np.sqrt(np.mean(np.concatenate(shake) ** 2)))
        tap(0.015 < rms < 0.05, "%s: displaced copies move by about sigma (0.03 A)" % name, "RMS %.4f A" % rms)
    check_bends(src_mols=[("ammonia", pyramid()), ("methylamine", methylamine())], steps=steps)
    return tap.finish()


def angle(x, c, i, j):
    u, v = x[i] - x[c], x[j] - x[c]
    return math.degrees(math.acos(np.dot(u, v) / (np.linalg.norm(u) * np.linalg.norm(v))))


def check_bends(src_mols, steps, count=20, max_deg=12.0):
    with tempfile.TemporaryDirectory() as tmp:
        src, out = os.path.join(tmp, "in.xyz"), os.path.join(tmp, "bends.xyz")
        write_xyz(src, src_mols)
        r = subprocess.run([sys.executable, TOOL, src, out, "--steps", str(steps), "--bends", str(count),
                            "--bend-angle", str(max_deg), "--seed", "5"], capture_output=True, text=True)
        frames = read_xyz(out) if r.returncode == 0 else []
    tap(len(frames) == 2 * count, "--bends: %d planar frames per amine" % count,
        "%d structures, exit %d %s" % (len(frames), r.returncode, r.stderr.strip()[-200:]))
    if len(frames) != 2 * count:
        return
    for name, first, groups in (("ammonia", 0, [[1], [2], [3]]), ("methylamine", count, [[1, 4, 5, 6], [2], [3]])):
        x0 = np.array([a[1] for a in dict(src_mols)[name]])
        nbrs = [g[0] for g in groups]
        worst_len, worst_plane = 0.0, 0.0
        for _, x in frames[first:first + count]:
            for g in groups:
                for a in [0] + g:
                    for b in g:
                        worst_len = max(worst_len, abs(np.linalg.norm(x[a] - x[b]) - np.linalg.norm(x0[a] - x0[b])))
            worst_plane = max(worst_plane, abs(height(x, 0, nbrs)))
        tap(worst_len < 5e-6 and worst_plane < 1e-5,
            "%s bends: bond lengths and group shapes kept, nitrogen stays in the plane" % name,
            "worst length change %.2e A, height %.2e A" % (worst_len, worst_plane))
        if name == "ammonia":
            dev = [max(abs(angle(x, 0, i, j) - 120) for i, j in ((1, 2), (1, 3), (2, 3)))
                   for _, x in frames[first:first + count]]
            sums = [sum(angle(x, 0, i, j) for i, j in ((1, 2), (1, 3), (2, 3))) for _, x in frames[first:first + count]]
            tap(max(dev) <= 2 * max_deg + 1e-4 and max(dev) > 0.3 * max_deg and max(abs(v - 360) for v in sums) < 1e-3,
                "ammonia bends: H-N-H angles move off 120 degrees by at most twice the bend angle, sum 360",
                "largest deviation %.2f degrees, angle sums within %.1e of 360" % (max(dev), max(abs(v - 360) for v in sums)))


if __name__ == "__main__":
    sys.exit(main())

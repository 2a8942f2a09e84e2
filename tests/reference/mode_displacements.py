#!/usr/bin/python3
"""tools/dataset/modes.py (normal-mode displacements of the basis set)
on an analytic potential with a known answer: a spring model of water
(harmonic pair springs at their rest lengths, so the geometry is an exact
minimum) as an external potential, its modes from nadir modes. Checks:
one-mode displacements have the Cartesian length d of E = k d^2 / 2, and at
a small E that energy (the harmonic limit; the mean of both ways, in which
the cubic terms cancel); the sampled structures'
mean energy is the classical equipartition value (3N - 6) kB T / 2
(any statistical mechanics text) within the sampling error; no atom moves
more than --largest in one mode; titles are the molecule keys; a record with
an imaginary mode is skipped with a message. The `lowest` step picks each
molecule's lowest converged minimum across chunk files. No reference method
needed. TAP output for tests/run."""
import json
import math
import os
import subprocess
import sys
import tempfile

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "helpers"))
from xyzfiles import read_xyz, write_xyz  # noqa: E402
from bundled import NADIR, ROOT, Tap  # noqa: E402

TOOL = os.path.join(ROOT, "tools", "dataset", "modes.py")
KB = 0.0019872043  # kcal/(mol K), CODATA 2018 R / 4184
tap = Tap()

WATER = [("O", [0.0, 0.0, 0.1173]), ("H", [0.0, 0.7572, -0.4692]), ("H", [0.0, -0.7572, -0.4692])]
POTENTIAL = r'''
import json, math, sys
spec = json.load(open(sys.argv[1]))
x = json.load(sys.stdin)["coordinates"]
g = [[0.0, 0.0, 0.0] for _ in x]
e = 0.0
for i, j, k, r0 in spec["pairs"]:
    d = [x[i][c] - x[j][c] for c in range(3)]
    r = math.sqrt(sum(v * v for v in d))
    e += 0.5 * k * (r - r0) ** 2
    for c in range(3):
        f = k * (r - r0) * d[c] / r
        g[i][c] += f
        g[j][c] -= f
print(json.dumps({"energy": e, "energy_unit": "kcal/mol", "gradient": g, "gradient_unit": "kcal/mol/angstrom"}))
'''


def springs(x):
    d = lambda i, j: float(np.linalg.norm(x[i] - x[j]))  # noqa: E731
    return [[0, 1, 1100.0, d(0, 1)], [0, 2, 1100.0, d(0, 2)], [1, 2, 160.0, d(1, 2)]]


def energy(pairs, x):
    return sum(0.5 * k * (np.linalg.norm(x[i] - x[j]) - r0) ** 2 for i, j, k, r0 in pairs)


def run(args):
    return subprocess.run([sys.executable, TOOL] + args, capture_output=True, text=True)


def check_displace(tmp):
    src = os.path.join(tmp, "water.xyz")
    write_xyz(src, [("water-springs", WATER)])
    x0 = np.array([a[1] for a in WATER])
    pairs = springs(x0)
    spec, pot = os.path.join(tmp, "springs.json"), os.path.join(tmp, "pot.py")
    json.dump({"pairs": pairs}, open(spec, "w"))
    open(pot, "w").write(POTENTIAL)
    anim, mj = os.path.join(tmp, "anim.xyz"), os.path.join(tmp, "modes.json")
    with open(mj, "w") as out:
        r = subprocess.run([NADIR, "modes", src, "--potential-command", "%s %s %s" % (sys.executable, pot, spec),
                            "--json", "--animate", "all", "--animate-out", anim, "--frames", "4"],
                           stdout=out, stderr=subprocess.PIPE, text=True)
    tap(r.returncode == 0, "nadir modes on the spring water", r.stderr.strip()[-300:])
    if r.returncode:
        return
    energies = [0.3, 1.2, 3.0]
    t, samples = 50.0, 2000
    disp = os.path.join(tmp, "disp.xyz")
    r = run(["displace", src, anim, mj, disp, "--energies", ",".join(map(str, energies)),
             "--samples", str(samples), "--temperatures", "%g" % t, "--seed", "4"])
    frames = read_xyz(disp) if r.returncode == 0 else []
    nsingle = 3 * len(energies) * 2
    tap(len(frames) == nsingle + samples, "3 modes x 3 energies x 2 signs, then %d samples" % samples,
        "%d structures, exit %d %s" % (len(frames), r.returncode, r.stderr.strip()[-200:]))
    if len(frames) != nsingle + samples:
        return
    tap(all(title == "water-springs" for title, _ in frames), "titles are the molecule key")
    ks = json.load(open(mj))["records"][0]["force_constants_kcal_per_mol_angstrom2"]
    want = [math.sqrt(2 * e / k) for k in ks for e in energies for _ in (1, -1)]
    got = [float(np.linalg.norm(x - x0)) for _, x in frames[:nsingle]]
    worst = max(abs(g / w - 1) for g, w in zip(got, want))
    tap(worst < 1e-5, "one-mode displacements: Cartesian length sqrt(2E/k) with k of nadir modes",
        "worst relative deviation %.2e (the files hold 8 decimals)" % worst)
    # the energy itself, which checks the meaning of k (per unit Cartesian
    # length): at 0.3 kcal/mol the mean of the two ways (the cubic terms of
    # the springs in Cartesian space cancel in it) is the harmonic value
    e = [energy(pairs, x) for _, x in frames[:nsingle]]
    pair_means = [(e[6 * m] + e[6 * m + 1]) / 2 for m in range(3)]
    worst = max(abs(v / energies[0] - 1) for v in pair_means)
    tap(worst < 0.02, "one-mode displacements at 0.3 kcal/mol carry that harmonic energy (within 2%)",
        "mean of both ways per mode %s kcal/mol" % " ".join("%.4f" % v for v in pair_means))
    moved = [float(np.max(np.linalg.norm(x - x0, axis=1))) for _, x in frames[:nsingle]]
    tap(min(moved) > 0.005 and all(abs(a - b) < 1e-6 for a, b in zip(moved[0::2], moved[1::2])),
        "each mode both ways by the same length", "largest atom moves %s" % " ".join("%.4f" % m for m in moved))
    mean = float(np.mean([energy(pairs, x) for _, x in frames[nsingle:]]))
    expect = 3 * KB * t / 2
    # mean of 2000 draws of kB T / 2 times a chi-square with 3 degrees of
    # freedom: standard error sqrt(3/2) kB T / sqrt(2000), 1.8% of the mean;
    # 4 errors allowed (50 K keeps the springs' anharmonicity below 1%)
    tap(abs(mean / expect - 1) < 0.08, "sampled structures: mean energy 3 kB T / 2 at 50 K (equipartition)",
        "mean %.4f kcal/mol, expected %.4f" % (mean, expect))
    r = run(["displace", src, anim, mj, disp, "--energies", "3", "--samples", "50", "--temperatures", "900",
             "--largest", "0.02"])
    frames = read_xyz(disp) if r.returncode == 0 else []
    moved = [float(np.max(np.linalg.norm(x - x0, axis=1))) for _, x in frames[:6]]
    tap(len(frames) == 56 and max(moved) <= 0.02 + 1e-7 and min(moved) > 0.02 - 1e-7,
        "--largest 0.02 caps every one-mode displacement", "largest atom moves %s" % " ".join("%.4f" % m for m in moved))
    doc = json.load(open(mj))
    doc["records"][0]["imaginary"] = 1
    bad = os.path.join(tmp, "imag.json")
    json.dump(doc, open(bad, "w"))
    r = run(["displace", src, anim, bad, disp])
    tap(r.returncode == 0 and "water-springs: 1 imaginary modes" in r.stderr and os.path.getsize(disp) == 0,
        "a record with an imaginary mode is skipped with a message", r.stderr.strip()[-200:])
    r = run(["displace", src, src, mj, disp])
    tap(r.returncode != 0 and "not a nadir modes animation title" in r.stderr,
        "a file that is not an animation is refused", r.stderr.strip()[-200:])


def check_lowest(tmp):
    rd = os.path.join(tmp, "relax")
    os.makedirs(rd)
    h2 = lambda r: [("H", [0.0, 0.0, 0.0]), ("H", [0.0, 0.0, r])]  # noqa: E731
    chunks = [[("alpha", h2(0.74), -1.0, True), ("alpha", h2(0.75), -3.0, True), ("beta", h2(0.76), -2.0, True)],
              [("beta", h2(0.77), -5.0, False), ("gamma", h2(0.78), -4.0, True)]]
    for c, recs in enumerate(chunks):
        write_xyz(os.path.join(rd, "chunk%04d-%02d.min.xyz" % (c, len(recs))), [(t, a) for t, a, _, _ in recs])
        json.dump({"records": [{"record": i + 1, "energy": e, "converged": ok} for i, (_, _, e, ok) in enumerate(recs)]},
                  open(os.path.join(rd, "chunk%04d-%02d.report.json" % (c, len(recs))), "w"))
    out = os.path.join(tmp, "lowest.xyz")
    r = run(["lowest", rd, out])
    frames = read_xyz(out) if r.returncode == 0 else []
    got = [(t, round(float(x[1][2]), 2)) for t, x in frames]
    tap(got == [("alpha", 0.75), ("beta", 0.76), ("gamma", 0.78)],
        "lowest: each molecule's lowest converged minimum, in first-seen order", "%s %s" % (got, r.stderr.strip()[-200:]))
    os.remove(os.path.join(rd, "chunk0001-02.report.json"))
    r = run(["lowest", rd, out])
    tap(r.returncode != 0 and "no chunk0001-02.report.json" in r.stderr, "lowest: a missing report is named",
        r.stderr.strip()[-200:])


def main():
    if not os.access(NADIR, os.X_OK):
        tap(False, "nadir built at %s" % NADIR)
        return tap.finish()
    with tempfile.TemporaryDirectory() as tmp:
        check_displace(tmp)
        check_lowest(tmp)
    return tap.finish()


if __name__ == "__main__":
    sys.exit(main())

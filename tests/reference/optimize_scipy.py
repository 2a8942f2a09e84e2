#!/usr/bin/python3
"""nadir optimize against scipy.optimize, end to end through the program.

Reference library: scipy.optimize.minimize(method="L-BFGS-B") from Debian's
python3-scipy (1.10), on the same analytic potential written independently
here in numpy: Morse pairs over 5 atoms (tests/cli/morse_potential.py's
parameters, D = 25.3 kcal/mol, a = 1.87 1/A, r_e = 1.213 A), which nadir
reaches as an external program. Both start from the same perturbed
trigonal bipyramid and must reach the same minimum energy within 1e-8
kcal/mol; the force calls of both are printed side by side (nadir's from
its report, scipy's nfev). TAP output for tests/run (ND_NADIR = program).
"""
import json
import os
import subprocess
import sys
import tempfile

import numpy as np
from scipy.optimize import minimize

D, A, RE = 25.3, 1.87, 1.213
START = np.array([[0.0, 0.0, 1.24], [0.0, 0.0, -1.19], [1.21, 0.05, 0.02],
                  [-0.58, 1.07, -0.04], [-0.63, -1.03, 0.06]])


def morse(flat):
    x = flat.reshape(-1, 3)
    e, g = 0.0, np.zeros_like(x)
    for i in range(len(x)):
        for j in range(i + 1, len(x)):
            d = x[j] - x[i]
            r = np.linalg.norm(d)
            ex = np.exp(-A * (r - RE))
            e += D * (1 - ex) ** 2
            f = 2 * D * (1 - ex) * A * ex * d / r
            g[j] += f
            g[i] -= f
    return e, g.ravel()


def main():
    nadir = os.environ.get("ND_NADIR", "build/nadir")
    pot = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "cli", "morse_potential.py")
    tests = []
    with tempfile.TemporaryDirectory() as tmp:
        xyz = os.path.join(tmp, "five.xyz")
        with open(xyz, "w") as f:
            f.write("5\nfive\n" + "".join("H %.10f %.10f %.10f\n" % tuple(p) for p in START))
        rep = os.path.join(tmp, "r.json")
        run = subprocess.run([nadir, "optimize", xyz, "--potential-command", pot, "--max-force", "1e-6",
                              "--report", rep], capture_output=True, text=True)
        tests.append(("nadir optimize converges on the Morse cluster", run.returncode == 0))
        rec = json.load(open(rep))["records"][0] if run.returncode == 0 else None
        res = minimize(morse, START.ravel(), jac=True, method="L-BFGS-B",
                       options={"gtol": 1e-9, "ftol": 0.0, "maxiter": 10000})
        gmax = np.max(np.linalg.norm(morse(res.x)[1].reshape(-1, 3), axis=1))
        tests.append(("scipy L-BFGS-B converges (largest force %.1e)" % gmax, gmax < 1e-6))
        if rec:
            print("# minimum energy: nadir %.12f, scipy %.12f kcal/mol" % (rec["energy"], res.fun))
            print("# force calls: nadir lbfgs+preconditioner %d (to largest force 1e-6), scipy L-BFGS-B %d "
                  "(to its own gtol 1e-9 per component; same-tolerance counts: bench/bench_optimize.c)"
                  % (rec["force_calls"], res.nfev))
            tests.append(("same minimum energy within 1e-8 kcal/mol", abs(rec["energy"] - res.fun) < 1e-8))
            tests.append(("not a trivial minimum (some pairs off r_e)", res.fun > 1.0))
        else:
            print("# nadir failed: " + run.stderr[-400:].replace("\n", " "))
            tests.append(("same minimum energy within 1e-8 kcal/mol", False))
    for i, (name, good) in enumerate(tests, 1):
        print("%s %d - %s" % ("ok" if good else "not ok", i, name))
    print("1..%d" % len(tests))
    return 0 if all(g for _, g in tests) else 1


if __name__ == "__main__":
    sys.exit(main())

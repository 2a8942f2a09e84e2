#!/usr/bin/python3
"""Runs scipy.optimize's L-BFGS-B on a potential evaluated by the caller.

Reference library: scipy.optimize.minimize(method="L-BFGS-B"), Debian's
python3-scipy (1.10). Spawned by tests/lib/scipy_bridge.c, which evaluates
nadir's own nd_energy for every point scipy asks for, so both methods see
exactly the same function and its force calls are counted the same way.

Protocol on stdin/stdout, one line each, numbers as exact decimal text:
  caller -> here:  "N MAX_FORCE MEMORY MAXITER"  then  "x_1 ... x_3N"
  here -> caller:  "x x_1 ... x_3N"          asking for energy and gradient
  caller -> here:  "E g_1 ... g_3N"          (or "error" to abort)
  here -> caller:  "done CALLS ITERATIONS CONVERGED E MAXFORCE"  then  "x_1 ... x_3N"
The run stops at the first evaluated point whose largest atomic force
(norm of an atom's three gradient components) is <= MAX_FORCE: the same test
nadir's minimisers use, so force calls are compared at the same tolerance.
scipy's own stopping tests are switched off (ftol = gtol = 0); if it stops
by itself first (line-search failure, iteration limit), CONVERGED is 0.
"""
import sys

import numpy as np
from scipy.optimize import minimize


class Reached(Exception):
    pass


class Aborted(Exception):
    pass


def main():
    head = sys.stdin.readline().split()
    n, max_force, memory, maxiter = int(head[0]), float(head[1]), int(head[2]), int(head[3])
    x0 = np.array([float(v) for v in sys.stdin.readline().split()], dtype=float)
    assert x0.size == 3 * n
    state = {"calls": 0, "x": x0.copy(), "e": float("nan"), "g": np.zeros(3 * n)}

    def fun(x):
        sys.stdout.write("x " + " ".join(repr(float(v)) for v in x) + "\n")
        sys.stdout.flush()
        line = sys.stdin.readline().split()
        if not line or line[0] == "error":
            raise Aborted()
        e = float(line[0])
        g = np.array([float(v) for v in line[1:]], dtype=float)
        state["calls"] += 1
        state.update(x=np.array(x, dtype=float), e=e, g=g)
        if np.max(np.linalg.norm(g.reshape(n, 3), axis=1)) <= max_force:
            raise Reached()
        return e, g

    converged, nit = 0, -1  # scipy reports no iteration count when stopped from inside
    try:
        res = minimize(fun, x0, jac=True, method="L-BFGS-B",
                       options={"maxcor": memory, "maxiter": maxiter, "maxfun": 100 * maxiter,
                                "ftol": 0.0, "gtol": 0.0})
        nit = int(res.nit)
    except Reached:
        converged = 1
    except Aborted:
        return 1
    g = state["g"]
    fm = float(np.max(np.linalg.norm(g.reshape(n, 3), axis=1)))
    sys.stdout.write("done %d %d %d %r %r\n" % (state["calls"], nit, converged, state["e"], fm))
    sys.stdout.write(" ".join(repr(float(v)) for v in state["x"]) + "\n")
    sys.stdout.flush()
    return 0


if __name__ == "__main__":
    sys.exit(main())

#!/usr/bin/python3
"""A Morse pair potential over all atom pairs, as an external program for
nadir's --potential-command (protocol: potential/external.h), for the
command-line tests of nadir optimize:
    E = sum over pairs D (1 - exp(-a (r - r_e)))^2,
    D = 25.3 kcal/mol, a = 1.87 1/A, r_e = 1.213 A (invented values),
with its exact gradient. A diatomic's minimum is r = r_e exactly."""
import json
import math
import sys

req = json.load(sys.stdin)
x = req["coordinates"]
D, a, re = 25.3, 1.87, 1.213
e = 0.0
g = [[0.0, 0.0, 0.0] for _ in x]
for i in range(len(x)):
    for j in range(i + 1, len(x)):
        d = [x[j][k] - x[i][k] for k in range(3)]
        r = math.sqrt(sum(c * c for c in d))
        ex = math.exp(-a * (r - re))
        e += D * (1 - ex) ** 2
        dr = 2 * D * (1 - ex) * a * ex
        for k in range(3):
            g[j][k] += dr * d[k] / r
            g[i][k] -= dr * d[k] / r
out = {"energy": e, "energy_unit": "kcal/mol"}
if "gradient" in req["want"]:
    out["gradient"] = g
    out["gradient_unit"] = "kcal/mol/angstrom"
json.dump(out, sys.stdout)

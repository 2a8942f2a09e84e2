#!/usr/bin/python3
"""The bundled model against the reference method on held-out molecules.

The committed held-out sets (tests/data/heldout/, compact form written by
tools/make-dataset.sh: GFN2-xTB energies and forces of molecules that never
entered training) are predicted with `nadir evaluate`, and the figures are
held to the accuracy goals of the bundled model:
  - relative conformer energies (the distinct relaxed minima of each
    molecule, from its lowest reference minimum): mean absolute error at most 0.5 kcal/mol;
  - rank correlation (Spearman) of the minima's energies within each molecule
    of three or more: median at least 0.9;
  - force components over every structure: mean absolute error at most 1.5
    kcal/mol/angstrom.
The larger drug-like molecules (large.jsonl.gz, when present: an extension
test, 20-40 heavy atoms) are evaluated the same way and their figures are
printed, not held to the goals.

Failures are known shortfalls (TAP TODO: listed, not failures) only while the
bundled model's provenance says it is a pilot. TAP output for tests/run.
"""
import gzip
import json
import os
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "helpers"))
from bundled import MODEL, NADIR, ROOT, SHORTFALL, Tap, model_is_pilot  # noqa: E402

tap = Tap()
HELD = os.path.join(ROOT, "tests", "data", "heldout")
GOALS = {"relative_mae": 0.5, "rank_median": 0.9, "force_mae": 1.5}
SAME = 0.05  # kcal/mol: minima closer than this are one conformer (common practice, no source)


def evaluate(path):
    p = subprocess.run([NADIR, "evaluate", MODEL, path, "--json"], capture_output=True, text=True)
    if p.returncode != 0:
        raise RuntimeError("nadir evaluate %s: exit %d: %s" % (path, p.returncode, p.stderr[-400:]))
    return json.loads(p.stdout)


def split(src, tmp, name):
    """The whole set, and its distinct relaxed minima alone, as two dataset
    files. Relaxations from different starts often reach the same minimum:
    minima of one molecule within SAME kcal/mol of each other in reference
    energy count once, or their arbitrary order would be scored as ranking."""
    every, minima = os.path.join(tmp, name + ".jsonl"), os.path.join(tmp, name + ".minima.jsonl")
    kept = {}
    n = 0
    with gzip.open(src, "rt") as f, open(every, "w") as a, open(minima, "w") as b:
        for line in f:
            a.write(line)
            if '"elements"' not in line:
                b.write(line)
                continue
            d = json.loads(line)
            if d.get("tag") != "minimum":
                continue
            have = kept.setdefault(d["key"], [])
            if all(abs(d["energy"] - e) > SAME for e in have):
                have.append(d["energy"])
                b.write(line)
                n += 1
    return every, minima, n


def figures(src, tmp, name):
    every, minima, n = split(src, tmp, name)
    whole = evaluate(every)
    mins = evaluate(minima) if n else None
    return {"structures": whole["structures"], "molecules": whole["molecules"], "minima": n,
            "force_mae": whole["force"]["mae"],
            "relative_mae": mins["relative_energy"]["mae"] if mins else float("nan"),
            "rank_median": mins["rank_correlation"]["median"] if mins and mins["rank_correlation"]["molecules"]
            else float("nan"),
            "rank_molecules": mins["rank_correlation"]["molecules"] if mins else 0}


def describe(f):
    return ("%d structures of %d molecules, %d minima: relative conformer energy MAE %.2f kcal/mol, "
            "rank correlation median %.3f (%d molecules), force MAE %.2f kcal/mol/A"
            % (f["structures"], f["molecules"], f["minima"], f["relative_mae"], f["rank_median"],
               f["rank_molecules"], f["force_mae"]))


def main():
    pilot = model_is_pilot()
    todo = SHORTFALL if pilot else None
    small = os.path.join(HELD, "test.jsonl.gz")
    if not os.path.exists(small):
        small = os.path.join(HELD, "pilot-test.jsonl.gz")
    tmp = tempfile.mkdtemp(prefix="nd-accuracy-")
    try:
        f = figures(small, tmp, "test")
        print("# %s: %s" % (os.path.basename(small), describe(f)))
        tap(f["minima"] > 0 and f["rank_molecules"] > 0,
            "the held-out set has relaxed minima, with molecules of three or more")
        tap(f["relative_mae"] <= GOALS["relative_mae"], "relative conformer energies: MAE <= 0.5 kcal/mol",
            "%.3f kcal/mol" % f["relative_mae"], todo)
        tap(f["rank_median"] >= GOALS["rank_median"], "per-molecule rank correlation of the minima: median >= 0.9",
            "%.3f" % f["rank_median"], todo)
        tap(f["force_mae"] <= GOALS["force_mae"], "force components: MAE <= 1.5 kcal/mol/A",
            "%.3f kcal/mol/A" % f["force_mae"], todo)
        large = os.path.join(HELD, "large.jsonl.gz")
        if os.path.exists(large):
            g = figures(large, tmp, "large")
            tap(g["structures"] > 0, "the larger molecules are evaluated", "large.jsonl.gz: " + describe(g))
    finally:
        for name in os.listdir(tmp):
            os.remove(os.path.join(tmp, name))
        os.rmdir(tmp)
    return tap.finish()


if __name__ == "__main__":
    sys.exit(main())

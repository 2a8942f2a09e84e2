#!/usr/bin/python3
"""The bundled model against the reference method on held-out molecules.

The committed held-out sets (tests/data/heldout/, compact form written by
tools/make-dataset.sh: GFN2-xTB energies and forces of molecules that never
entered training) are predicted with `nadir evaluate` (through
tools/model-figures.py), and the figures are held to the accuracy goals of
the bundled model:
  - relative conformer energies (the distinct relaxed minima of each
    molecule, from its lowest reference minimum): mean absolute error at
    most 0.5 kcal/mol;
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
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "helpers"))
from bundled import MODEL, NADIR, ROOT, SHORTFALL, Tap, model_is_pilot  # noqa: E402
sys.path.insert(0, os.path.join(ROOT, "tools"))
figures_tool = __import__("model-figures")  # noqa: E402

tap = Tap()
HELD = os.path.join(ROOT, "tests", "data", "heldout")
GOALS = figures_tool.GOALS


def main():
    todo = SHORTFALL if model_is_pilot() else None
    small = os.path.join(HELD, "test.jsonl.gz")
    if not os.path.exists(small):
        small = os.path.join(HELD, "pilot-test.jsonl.gz")
    f = figures_tool.figures(MODEL, small, NADIR)
    print("# %s: %s" % (os.path.basename(small), figures_tool.describe(f)))
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
        g = figures_tool.figures(MODEL, large, NADIR)
        tap(g["structures"] > 0, "the larger molecules are evaluated", "large.jsonl.gz: " + figures_tool.describe(g))
    return tap.finish()


if __name__ == "__main__":
    sys.exit(main())

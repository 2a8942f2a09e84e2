#!/usr/bin/python3
"""The accuracy figures of a model on a held-out set, as the goals of the
bundled model define them.

  tools/model-figures.py MODEL SET.jsonl[.gz] [--json] [--nadir PROGRAM]

SET is a dataset (potential/dataset.h; gzip-compressed or not) of molecules
the model never trained on, with reference energies and forces, its relaxed
minima tagged "minimum" (as tools/make-dataset.sh writes them). Prints:
  - relative conformer energies: MAE over the distinct minima of each
    molecule, measured from its lowest reference minimum (goal <= 0.5
    kcal/mol);
  - the Spearman rank correlation of the minima's energies within each
    molecule of three or more: median (goal >= 0.9);
  - force components over every structure: MAE (goal <= 1.5 kcal/mol/A);
  - the counts behind them, and the force MAE of each stage of the set
    (tag: embedded conformers, torsion-varied shapes, relaxation paths,
    minima, thermal displacements...), since a model that is good on the
    shapes it trained on can still be poor at the relaxed ones it must rank.
Relaxations from different starts often reach the same minimum: minima of
one molecule within SAME kcal/mol of each other in reference energy count
once, or their arbitrary order would be scored as ranking. Everything is
computed by `nadir evaluate` on the whole set and on its distinct minima.
Used by tests/reference/model_accuracy.py and tools/train-model.sh.
"""
import gzip
import json
import os
import subprocess
import sys
import tempfile

GOALS = {"relative_mae": 0.5, "rank_median": 0.9, "force_mae": 1.5}
SAME = 0.05  # kcal/mol: minima closer than this are one conformer (common practice, no source)


def evaluate(nadir, model, path):
    p = subprocess.run([nadir, "evaluate", model, path, "--json"], capture_output=True, text=True)
    if p.returncode != 0:
        raise RuntimeError("nadir evaluate %s: exit %d: %s" % (path, p.returncode, p.stderr[-400:]))
    return json.loads(p.stdout)


def split(src, tmp):
    """The whole set, its distinct minima, and each stage (tag) as dataset
    files; returns the first two, the count of minima and {tag: file}."""
    every, minima = os.path.join(tmp, "all.jsonl"), os.path.join(tmp, "minima.jsonl")
    kept, n, header, stages = {}, 0, "", {}
    opener = gzip.open if src.endswith(".gz") else open
    with opener(src, "rt") as f, open(every, "w") as a, open(minima, "w") as b:
        for line in f:
            a.write(line)
            if '"elements"' not in line:
                b.write(line)
                header += line
                continue
            d = json.loads(line)
            tag = d.get("tag") or "untagged"
            if tag not in stages:
                stages[tag] = open(os.path.join(tmp, "stage%d.jsonl" % len(stages)), "w")
                stages[tag].write(header)
            stages[tag].write(line)
            if d.get("tag") != "minimum":
                continue
            have = kept.setdefault(d["key"], [])
            if all(abs(d["energy"] - e) > SAME for e in have):
                have.append(d["energy"])
                b.write(line)
                n += 1
    for t in stages.values():
        t.close()
    return every, minima, n, {t: h.name for t, h in stages.items()}


def figures(model, src, nadir="build/nadir"):
    tmp = tempfile.mkdtemp(prefix="nd-figures-")
    try:
        every, minima, n, stages = split(src, tmp)
        whole = evaluate(nadir, model, every)
        mins = evaluate(nadir, model, minima) if n else None
        by_stage = {t: evaluate(nadir, model, path)["force"]["mae"] for t, path in sorted(stages.items())}
    finally:
        for name in os.listdir(tmp):
            os.remove(os.path.join(tmp, name))
        os.rmdir(tmp)
    rc = mins["rank_correlation"] if mins else {"molecules": 0}
    return {"set": os.path.basename(src), "structures": whole["structures"], "molecules": whole["molecules"],
            "minima": n, "force_mae": whole["force"]["mae"],
            "relative_mae": mins["relative_energy"]["mae"] if mins else float("nan"),
            "rank_median": rc["median"] if rc["molecules"] else float("nan"),
            "rank_molecules": rc["molecules"], "force_mae_by_stage": by_stage,
            "energy_within_one_spread": whole["spread"]["energy"]["within_one_spread"]
            if whole.get("spread") else float("nan")}


def plain(v):
    """v with NaN and infinities as None, for JSON (which has no NaN)."""
    if isinstance(v, float) and (v != v or abs(v) == float("inf")):
        return None
    if isinstance(v, dict):
        return {k: plain(x) for k, x in v.items()}
    if isinstance(v, list):
        return [plain(x) for x in v]
    return v


def meets_goals(f):
    return (f["relative_mae"] <= GOALS["relative_mae"] and f["rank_median"] >= GOALS["rank_median"]
            and f["force_mae"] <= GOALS["force_mae"])


def describe(f):
    return ("%d structures of %d molecules, %d distinct minima: relative conformer energy MAE %.2f kcal/mol, "
            "rank correlation median %.3f (%d molecules), force MAE %.2f kcal/mol/A"
            % (f["structures"], f["molecules"], f["minima"], f["relative_mae"], f["rank_median"],
               f["rank_molecules"], f["force_mae"])
            + ("; by stage: " + ", ".join("%s %.2f" % kv for kv in f["force_mae_by_stage"].items())
               if f.get("force_mae_by_stage") else ""))


def main(argv):
    args = [a for a in argv if a != "--json"]
    nadir = "build/nadir"
    if "--nadir" in args:
        i = args.index("--nadir")
        nadir = args[i + 1]
        del args[i:i + 2]
    if len(args) != 2 or args[0] in ("-h", "--help"):
        sys.stdout.write(__doc__)
        return 0 if args and args[0] in ("-h", "--help") else 2
    f = figures(args[0], args[1], nadir)
    print(json.dumps(plain(f), indent=1) if "--json" in argv else describe(f))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

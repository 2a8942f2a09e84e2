#!/usr/bin/python3
"""Selection helpers of an active-learning round (tools/active-learning.sh):
which structures the model visited, how much its members disagree on each,
and which of them go to the reference method.

Every output is written to a temporary name and renamed (an interrupted run
never leaves a half-written file). Nothing here is random: the round's
randomness is in the nadir commands, which take its seed.

  molecules IN.smi OUTDIR N --exclude A.smi,B.smi,... [--chunk K] [--skip S]
        the first N molecules of IN after its first S (N <= 0: all) into OUTDIR/chunkCCCC-KK.smi,
        K molecules per chunk (default 10); the chunk paths go to stdout.
        Refuses (exit 1, naming both) a molecule that is also in one of the
        excluded lists: a round must never label a training or held-out
        molecule. Molecules are compared as graphs (make-molecules.py's
        graph_from_smiles and wl_hash), not as strings.
  collect OUT.xyz --embeddings E.sdf [--conformers REPORT.json] [--paths T.xyz]
          [--relaxed R.xyz] --stats S.json
        every structure the model reported (the conformer search's minima,
        from its JSON report: full precision, unlike the SD file) or visited
        (each frame of the relaxation paths, and their ends), one XYZ frame
        each, titled "KEY SOURCE". Structures with a bond of the molecule's
        graph broken are left out (a molecule in pieces is not what
        conformer work visits); those with two atoms closer than bonded that
        the graph does not bond (a ring collapsed, a hydrogen on its way to
        another atom) are kept and counted: spurious minima of the model are
        what a round must teach it. Counts in S.json
  score ENERGY.json VISITED.xyz OUT.tsv [--model-info M.json]
        per structure of VISITED.xyz, from `nadir energy --json --gradient`:
        the ensemble-mean energy, the energy spread per atom and the largest
        per-atom force spread (the score, see active-learning.sh)
  pick CHUNKS.txt OUT.xyz OUT.tsv --stats S.json [--per-molecule C]
       [--min-spread F] [--energy-tol E] [--distance-tol D] [--picks N]
        the structures to label: by score, highest first, at most C per
        molecule, none with a score below F, none within E kcal/mol (model
        energy) of a structure of the same molecule already picked, nor
        within D angstrom of one (RMS difference of all interatomic
        distances: no alignment needed; consecutive steps of a relaxation
        path); then the
        N highest of all (0: no limit), from the score tables of the chunks
        listed (CHUNK.smi -> CHUNK.scores.tsv). OUT.xyz titles are the molecule keys
        (for nadir label --key-from title); OUT.tsv says where each came from
  fingerprint MODEL
        a 16-digit hash of what a model file computes with: its header less
        the free-form provenance, and its weights (potential/model.h), so an
        edit of the provenance alone leaves it unchanged
  report WORK
        the round's summary (counts, and the model's errors on the labelled
        picks from WORK/before.json) to stdout and WORK/summary.json
"""
import hashlib
import importlib.util
import json
import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.dont_write_bytecode = True  # no __pycache__ beside the tools
sys.path.insert(0, HERE)
from structures import COVALENT, read_sdf, read_smi, read_xyz, write_atomic, xyz_text  # noqa: E402

# Two atoms are bonded when closer than 1.25 times the sum of their covalent
# radii (common practice, no source): C-C 1.90, C-H 1.34 A, while hydrogen
# bonds (H...O 1.8 A and more) and 1-3 contacts (C...C 2.5 A) stay out.
BOND_FACTOR = 1.25
SCORE_COLUMNS = ("index", "key", "source", "atoms", "energy", "energy_spread_per_atom", "force_spread_max")


def die(msg):
    sys.stderr.write("active.py: %s\n" % msg)
    sys.exit(1)


def opt(args, name, default):
    if name in args:
        i = args.index(name)
        if i + 1 >= len(args):
            die("%s needs a value" % name)
        return args[i + 1]
    return default


def generator():
    """tools/make-molecules.py as a module (its graph functions)."""
    path = os.path.join(HERE, "..", "make-molecules.py")
    spec = importlib.util.spec_from_file_location("make_molecules", path)
    gen = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen)
    return gen


# ---------------------------------------------------------------- molecules

def cmd_molecules(args):
    src, outdir, n = args[0], args[1], int(args[2])
    chunk = int(opt(args, "--chunk", "10"))
    skip = int(opt(args, "--skip", "0"))
    excluded = [p for p in opt(args, "--exclude", "").split(",") if p]
    gen = generator()

    def graph(path, lineno, smi):
        try:
            return gen.wl_hash(gen.graph_from_smiles(smi))
        except (ValueError, KeyError, IndexError) as e:
            die("%s, line %d: '%s' is outside the SMILES subset of tools/make-molecules.py (%s); "
                "the overlap check needs it" % (path, lineno, smi, e))

    taken = {}
    for path in excluded:
        for k, (smi, name) in enumerate(read_smi(path), 1):
            taken.setdefault(graph(path, k, smi), "%s (%s, line %d)" % (name, path, k))
    mols = read_smi(src)[skip:]
    if n > 0:
        mols = mols[:n]
    if not mols:
        die("%s: no molecules (after the first %d)" % (src, skip))
    for k, (smi, name) in enumerate(mols, skip + 1):
        h = graph(src, k, smi)
        if h in taken:
            die("%s, line %d: molecule %s is also %s; a round must not label training or held-out "
                "molecules" % (src, k, name, taken[h]))
    os.makedirs(outdir, exist_ok=True)
    # chunk C holds molecules chunk*C ..., named by C and its molecule count,
    # so a longer list finds its full chunks done already
    for c in range(0, len(mols), chunk):
        part = mols[c:c + chunk]
        path = os.path.join(outdir, "chunk%04d-%02d.smi" % (c // chunk, len(part)))
        if not os.path.exists(path):
            write_atomic(path, "".join("%s %s\n" % m for m in part))
        print(path)


# ---------------------------------------------------------------- collect

def bond_set(els, xyz):
    r = np.array([COVALENT.get(e, 0.8) for e in els])
    d = np.linalg.norm(xyz[:, None, :] - xyz[None, :, :], axis=2)
    i, j = np.nonzero(np.triu(d < BOND_FACTOR * (r[:, None] + r[None, :]), 1))
    return set(zip(i.tolist(), j.tolist()))


def cmd_collect(args):
    dst = args[0]
    stats_path = opt(args, "--stats", None) or die("collect needs --stats")
    embed = read_sdf(opt(args, "--embeddings", None) or die("collect needs --embeddings"))
    # the molecule's graph, from its SMILES through nadir build's bond table
    graphs = {}
    for r in embed:
        graphs.setdefault(r["title"], (r["elements"], {(min(i, j), max(i, j)) for i, j, _ in r["bonds"]}))
    items = []  # (key, source, elements, xyz)
    conf = opt(args, "--conformers", None)
    if conf and os.path.exists(conf):
        with open(conf) as f:
            report = json.load(f)
        for mol in report.get("molecules", []):
            k = mol["molecule"]["title"].split()[0] if mol["molecule"]["title"].split() else "unnamed"
            for c in mol.get("conformers", []):
                els = [a[0] for a in c["coordinates"]]
                xyz = np.array([a[1:4] for a in c["coordinates"]], dtype=float)
                items.append((k, "conformer-%d" % c["rank"], els, xyz, "conformers"))
    for opt_name, kind in (("--paths", "paths"), ("--relaxed", "relaxed")):
        path = opt(args, opt_name, None)
        if not path or not os.path.exists(path):
            continue
        record = {}
        for title, els, xyz in read_xyz(path):
            words = title.split() or ["unnamed"]
            key = words[0]
            if kind == "paths":
                # a record's frames run from "frame 0": a new relaxation path
                frame = int(words[words.index("frame") + 1]) if "frame" in words else 0
                if frame == 0:
                    record[key] = record.get(key, 0) + 1
                items.append((key, "path-%d-frame-%d" % (record.get(key, 1), frame), els, xyz, kind))
            else:
                record[key] = record.get(key, 0) + 1
                items.append((key, "relaxed-%d" % record[key], els, xyz, kind))
    out, kept, refused, close, orphans = [], {}, {}, {}, set()
    for key, source, els, xyz, kind in items:
        if key not in graphs:
            orphans.add(key)  # nadir build failed for it (named in its log)
            continue
        gels, gbonds = graphs[key]
        if list(els) != list(gels):
            die("%s %s: its atoms differ from the embedding's" % (key, source))
        found = bond_set(els, xyz)
        if gbonds - found:
            refused[kind] = refused.get(kind, 0) + 1
            continue
        if found - gbonds:
            close[kind] = close.get(kind, 0) + 1
        kept[kind] = kept.get(kind, 0) + 1
        out.append(xyz_text("%s %s" % (key, source), els, xyz))
    write_atomic(dst, "".join(out))
    for key in sorted(orphans):
        sys.stderr.write("active.py: %s: no embedding to take its bonds from; its structures are left out\n" % key)
    write_atomic(stats_path, json.dumps({"molecules": len(graphs), "kept": kept, "bonds_broken": refused,
                                         "close_contacts": close, "no_embedding": sorted(orphans)}) + "\n")


# ---------------------------------------------------------------- score

def cmd_score(args):
    src, visited, dst = args[0], args[1], args[2]
    info = opt(args, "--model-info", None)
    with open(src) as f:
        text = f.read()
    doc = json.loads(text) if text.strip() else {}  # empty: nothing was visited
    frames = read_xyz(visited)
    rows = ["\t".join(SCORE_COLUMNS)]
    for r in doc.get("records", []):
        i = r["record"]
        title = frames[i - 1][0].split()
        if r.get("force_spread_max") is None:
            die("%s, record %d: no force spread (run nadir energy with --gradient and an ensemble)" % (src, i))
        rows.append("%d\t%s\t%s\t%d\t%.6f\t%.6g\t%.6g" % (i, title[0], title[1], r["atoms"], r["energy"],
                                                       r["energy_spread"] / r["atoms"], r["force_spread_max"]))
    for fl in doc.get("failures", []):
        sys.stderr.write("active.py: not scored: %s\n" % fl.get("message", fl))
    write_atomic(dst, "\n".join(rows) + "\n")
    if info:
        write_atomic(info, json.dumps(doc.get("model", {}), indent=1) + "\n")


# ---------------------------------------------------------------- pick

def read_scores(path):
    rows = []
    with open(path) as f:
        head = f.readline().rstrip("\n").split("\t")
        if tuple(head) != SCORE_COLUMNS:
            die("%s, line 1: not a score table" % path)
        for n, line in enumerate(f, 2):
            p = line.rstrip("\n").split("\t")
            if len(p) != len(SCORE_COLUMNS):
                die("%s, line %d: %d columns, expected %d" % (path, n, len(p), len(SCORE_COLUMNS)))
            rows.append({"index": int(p[0]), "key": p[1], "source": p[2], "atoms": int(p[3]), "energy": float(p[4]),
                         "energy_spread_per_atom": float(p[5]), "score": float(p[6]), "table": path})
    return rows


def cmd_pick(args):
    chunk_list, dst_xyz, dst_tsv = args[0], args[1], args[2]
    stats_path = opt(args, "--stats", None) or die("pick needs --stats")
    cap = int(opt(args, "--per-molecule", "4"))
    floor = float(opt(args, "--min-spread", "5"))
    tol = float(opt(args, "--energy-tol", "0.05"))
    dtol = float(opt(args, "--distance-tol", "0.05"))
    total = int(opt(args, "--picks", "0"))
    # only the chunks of this run's molecules: a shorter --count leaves the
    # rest out
    with open(chunk_list) as f:
        tables = [line.strip()[:-len(".smi")] + ".scores.tsv" for line in f if line.strip()]
    for t in tables:
        if not os.path.exists(t):
            die("%s: missing (listed in %s)" % (t, chunk_list))
    if not tables:
        die("%s: no chunks" % chunk_list)
    rows = [r for t in tables for r in read_scores(t)]
    by_key = {}
    for r in rows:
        by_key.setdefault(r["key"], []).append(r)
    frames = {}

    def frame(r):
        """(elements, xyz) of a scored structure, from its chunk's visited.xyz."""
        visited = r["table"][:-len(".scores.tsv")] + ".visited.xyz"
        if visited not in frames:
            frames[visited] = read_xyz(visited)
        title, els, xyz = frames[visited][r["index"] - 1]
        if title.split()[:2] != [r["key"], r["source"]]:
            die("%s, record %d: '%s' is not the %s %s of %s" % (visited, r["index"], title, r["key"], r["source"],
                                                               r["table"]))
        return els, xyz, "%s:%d" % (os.path.basename(visited), r["index"])

    def distances(xyz):
        d = np.linalg.norm(xyz[:, None, :] - xyz[None, :, :], axis=2)
        return d[np.triu_indices(len(xyz), 1)]

    picked, low, dup_e, dup_d, capped = [], 0, 0, 0, 0
    for key in sorted(by_key):
        chosen = []
        # highest score first; ties in the order visited, so runs agree
        for r in sorted(by_key[key], key=lambda r: (-r["score"], r["table"], r["index"])):
            if r["score"] < floor:
                low += 1
            elif len(chosen) >= cap:
                capped += 1
            elif any(abs(r["energy"] - c["energy"]) < tol for c in chosen):
                dup_e += 1  # likely the same point (a path's last steps, a minimum found twice)
            else:
                r["distances"] = distances(frame(r)[1])
                if any(np.sqrt(np.mean((r["distances"] - c["distances"]) ** 2)) < dtol for c in chosen):
                    dup_d += 1  # neighbouring steps of one path
                else:
                    chosen.append(r)
        picked += chosen
    picked.sort(key=lambda r: (-r["score"], r["key"], r["table"], r["index"]))
    over = 0
    if total > 0 and len(picked) > total:
        over = len(picked) - total
        picked = picked[:total]
    out, tsv = [], ["rank\tkey\tsource\tatoms\tforce_spread_max\tenergy_spread_per_atom\tenergy\tfrom"]
    for k, r in enumerate(picked, 1):
        els, xyz, where = frame(r)
        out.append(xyz_text(r["key"], els, xyz))
        tsv.append("%d\t%s\t%s\t%d\t%.4f\t%.5f\t%.4f\t%s" % (k, r["key"], r["source"], r["atoms"], r["score"],
                                                          r["energy_spread_per_atom"], r["energy"], where))
    write_atomic(dst_xyz, "".join(out))
    write_atomic(dst_tsv, "\n".join(tsv) + "\n")
    scores = np.array([r["score"] for r in rows])
    stats = {"scored": len(rows), "molecules": len(by_key), "picked": len(picked), "below_min_spread": low,
             "near_duplicates_energy": dup_e, "near_duplicates_distance": dup_d, "over_molecule_cap": capped,
             "over_total": over, "per_molecule": cap, "min_spread": floor, "energy_tol": tol,
             "distance_tol": dtol, "picks_limit": total,
             "score_median_visited": float(np.median(scores)),
             "score_median_picked": float(np.median([r["score"] for r in picked])) if picked else None}
    write_atomic(stats_path, json.dumps(stats, indent=1) + "\n")
    sys.stderr.write("pick: %d of %d structures (%d molecules): %d below the minimum spread, %d over the cap of %d "
                     "per molecule, %d + %d near duplicates (energy, distances), %d over the limit\n"
                     % (len(picked), len(rows), len(by_key), low, capped, cap, dup_e, dup_d, over))


# ---------------------------------------------------------------- fingerprint

def cmd_fingerprint(args):
    path = args[0]
    with open(path, "rb") as f:
        data = f.read()
    magic = b"nadir-model 1\n"
    tail = data.rfind(b"\nchecksum ")
    if not data.startswith(magic) or tail < 0:
        die("%s: not a nadir model file (version 1)" % path)
    # latin-1 maps bytes to characters one to one, so offsets stay byte offsets
    text = data[len(magic):tail].decode("latin-1")
    try:
        header, end = json.JSONDecoder().raw_decode(text)
    except ValueError as e:
        die("%s: model header is not JSON (%s)" % (path, e))
    header.pop("provenance", None)
    h = hashlib.sha256(json.dumps(header, sort_keys=True).encode())
    h.update(data[len(magic) + end:tail])
    print(h.hexdigest()[:16])


# ---------------------------------------------------------------- report

def load(path, default=None):
    if not os.path.exists(path):
        return default
    with open(path) as f:
        return json.load(f)


def cmd_report(args):
    work = args[0]
    with open(os.path.join(work, "chunks.txt")) as f:
        chunks = [line.strip()[:-len(".smi")] + ".collect.json" for line in f if line.strip()]
    kept, bad, close, mols = {}, {}, {}, 0
    for c in chunks:
        s = load(c)
        if s is None:
            die("%s: missing (the chunk was not collected)" % c)
        mols += s["molecules"]
        for k, v in s["kept"].items():
            kept[k] = kept.get(k, 0) + v
        for k, v in s["bonds_broken"].items():
            bad[k] = bad.get(k, 0) + v
        for k, v in s["close_contacts"].items():
            close[k] = close.get(k, 0) + v
    pick = load(os.path.join(work, "pick.json"), {})
    labelled = 0
    lab = os.path.join(work, "active.jsonl")
    if os.path.exists(lab):
        with open(lab) as f:
            labelled = sum(1 for line in f if '"elements"' in line)
    ev = load(os.path.join(work, "before.json"))
    model = load(os.path.join(work, "model.json"), {})
    visited = sum(kept.values())
    s = {"work": work, "molecules": mols, "visited": visited, "visited_by_source": kept,
         "bonds_broken": bad, "close_contacts": close, "pick": pick, "labelled": labelled, "before": ev}
    held = model.get("provenance", {}).get("heldout_test")
    lines = ["active-learning round %s" % work,
             "  molecules           %d" % mols,
             "  structures visited  %d (conformer minima %d, relaxation path frames %d, path ends %d)"
             % (visited, kept.get("conformers", 0), kept.get("paths", 0), kept.get("relaxed", 0)),
             "                      %d of them with atoms closer than bonded that the graph does not bond"
             " (kept); %d more left out, a bond broken" % (sum(close.values()), sum(bad.values()))]
    if pick:
        lines.append("  picked              %d (at most %d per molecule, force spread >= %g kcal/mol/A; %d below it,"
                     " %d over the cap," % (pick["picked"], pick["per_molecule"], pick["min_spread"],
                                            pick["below_min_spread"], pick["over_molecule_cap"]))
        lines.append("                      near duplicates: %d within %g kcal/mol, %d within %g A; %d over the limit)"
                     % (pick["near_duplicates_energy"], pick["energy_tol"], pick["near_duplicates_distance"],
                        pick["distance_tol"], pick["over_total"]))
        if pick["score_median_picked"] is not None:
            lines.append("  largest per-atom force spread, median: %.2f picked, %.2f of all visited (kcal/mol/A)"
                         % (pick["score_median_picked"], pick["score_median_visited"]))
    lines.append("  labelled            %d (%s)" % (labelled, lab))
    if ev:
        e, f, sp = ev["energy"], ev["force"], ev.get("spread", {})
        lines.append("  the model on the labelled picks (\"before\"; kcal/mol, kcal/mol/A):")
        lines.append("    force MAE %.3f  RMSE %.3f   energy MAE %.3f (%.4f per atom)   relative energy MAE %s"
                     % (f["mae"], f["rmse"], e["mae"], e["mae_per_atom"],
                        "%.3f" % ev["relative_energy"]["mae"] if ev.get("relative_energy", {}).get("structures")
                        else "n/a"))
        for name, label in (("energy", "energy spread"), ("force_per_atom", "force spread per atom")):
            if name in sp:
                x = sp[name]
                lines.append("    %-22s mean %.3f; rank correlation with |error| %.2f; errors within one spread "
                             "%.0f%%, two %.0f%%" % (label, x["mean"], x["rank_correlation_with_error"],
                                                     100 * x["within_one_spread"], 100 * x["within_two_spreads"]))
    if held:
        lines.append("  the model's held-out figures, for comparison: force MAE %.3f, relative energy MAE %.3f (%s)"
                     % (held.get("force_mae", float("nan")), held.get("relative_mae", float("nan")),
                        "%s, %s molecules" % (held.get("set", "?"), held.get("molecules", "?"))))
    text = "\n".join(lines) + "\n"
    sys.stdout.write(text)
    write_atomic(os.path.join(work, "summary.json"), json.dumps(s, indent=1) + "\n")


def main():
    if len(sys.argv) < 2 or sys.argv[1] in ("-h", "--help"):
        sys.stdout.write(__doc__)
        return
    cmds = {"molecules": cmd_molecules, "collect": cmd_collect, "score": cmd_score, "pick": cmd_pick,
            "fingerprint": cmd_fingerprint, "report": cmd_report}
    c = sys.argv[1]
    if c not in cmds:
        die("unknown command '%s' (see --help)" % c)
    if len(sys.argv) < {"molecules": 5, "collect": 3, "score": 5, "pick": 5, "fingerprint": 3, "report": 3}[c]:
        die("%s: too few arguments (see --help)" % c)
    cmds[c](sys.argv[2:])


if __name__ == "__main__":
    main()

#!/usr/bin/python3
"""Summary of the datasets of a make-dataset work directory, and the held-out
sets in compact form.

  summary.py WORK [--sets train,test,large] [--seconds S] [--compact-per-molecule N]

Reads WORK/SET.jsonl (dataset format of potential/dataset.h; energies in
kcal/mol, forces in kcal/mol/angstrom), prints per set: molecules,
structures (by tag), atoms per structure, element counts (atoms over all
structures, and molecules containing each element), energy per atom range,
energy above the lowest structure of the same molecule, force component
range and RMS, and the audit results found in WORK/logs/label.SET.log.
Writes WORK/summary.json.

Compact form (WORK/compact/SET.jsonl.gz for test and large): the same lines
with coordinates rounded to 1e-5 A, forces to 1e-4 kcal/mol/A, energies to
1e-5 kcal/mol, at most N structures per molecule (default 24; every minimum
first, then one structure of each other stage in turn), so
that the held-out sets are small enough to commit (a few MB).
"""
import gzip
import json
import os
import re
import sys
from collections import Counter, defaultdict


def opt(args, name, default):
    if name in args:
        return args[args.index(name) + 1]
    return default


def read(path):
    rows = []
    with open(path) as f:
        for line in f:
            if not line.endswith("\n") or '"elements"' not in line:
                continue
            try:
                rows.append(json.loads(line))
            except ValueError:
                pass
    return rows


def audits(logpath):
    out = {"audited": 0, "ok": 0, "refused": 0, "worst": 0.0}
    if not os.path.exists(logpath):
        return out
    pat = re.compile(r"audit: record .*worst \|gradient - finite difference\| ([0-9.eE+-]+) .*: (\w+)")
    for line in open(logpath, errors="replace"):
        m = pat.search(line)
        if m:
            out["audited"] += 1
            v = float(m.group(1))
            out["worst"] = max(out["worst"], v)
            if m.group(2) == "ok":
                out["ok"] += 1
            else:
                out["refused"] += 1
    return out


def timings(path):
    """Measured wall time per stage from WORK/logs/timing.txt: labelling
    ('SET NAME N END START'), relaxations ('relax CHUNK N SECONDS') and scans
    ('scan SET/KEY N SECONDS')."""
    out = defaultdict(lambda: [0, 0.0])
    if not os.path.exists(path):
        return {}
    for line in open(path):
        p = line.split()
        try:
            if p[0] in ("relax", "scan") and len(p) == 4:
                k, n, t = p[0] + " (optimiser, xtb potential)", int(p[2]), float(p[3])
            elif len(p) == 5:
                k, n, t = "label " + p[1].split(".")[0], int(p[2]), float(p[3]) - float(p[4])
            else:
                continue
        except ValueError:
            continue
        out[k][0] += n
        out[k][1] += t
    return {k: {"structures": n, "seconds": round(t, 1), "seconds_per_structure": round(t / n, 3) if n else None}
            for k, (n, t) in sorted(out.items())}


def summarise(rows):
    mols = defaultdict(list)
    for r in rows:
        mols[r["key"]].append(r)
    tags = Counter(r.get("tag") or "untagged" for r in rows)
    atoms = Counter()
    mol_elements = Counter()
    for k, v in mols.items():
        for e in set(v[0]["elements"]):
            mol_elements[e] += 1
    force_lo = force_hi = 0.0
    fsq = 0.0
    nf = 0
    epa = []
    above = []
    nat = []
    for k, v in mols.items():
        e0 = min(r["energy"] for r in v)
        for r in v:
            n = len(r["elements"])
            nat.append(n)
            atoms.update(r["elements"])
            epa.append(r["energy"] / n)
            above.append(r["energy"] - e0)
            f = r.get("forces") or []
            if f:
                force_lo = min(force_lo, min(f))
                force_hi = max(force_hi, max(f))
                fsq += sum(x * x for x in f)
                nf += len(f)
    above.sort()
    def pct(a, p):
        return a[min(len(a) - 1, int(p * len(a)))] if a else 0.0
    return {
        "molecules": len(mols),
        "structures": len(rows),
        "structures_by_tag": dict(sorted(tags.items())),
        "structures_per_molecule": round(len(rows) / max(1, len(mols)), 1),
        "atoms_per_structure": [min(nat), max(nat)] if nat else [0, 0],
        "atoms_by_element": dict(sorted(atoms.items())),
        "molecules_with_element": dict(sorted(mol_elements.items())),
        "energy_per_atom_kcal_mol": [round(min(epa), 3), round(max(epa), 3)] if epa else [0, 0],
        "energy_above_molecule_lowest_kcal_mol": {
            "median": round(pct(above, 0.5), 2), "p95": round(pct(above, 0.95), 2),
            "max": round(above[-1], 2) if above else 0.0},
        "force_component_kcal_mol_angstrom": {
            "min": round(force_lo, 2), "max": round(force_hi, 2),
            "rms": round((fsq / nf) ** 0.5, 3) if nf else 0.0},
    }


def compact(rows, path, per):
    mols = defaultdict(list)
    order = []
    for r in rows:
        if r["key"] not in mols:
            order.append(r["key"])
        mols[r["key"]].append(r)
    n = 0
    tmp = path + ".tmp"
    with gzip.open(tmp, "wt", compresslevel=9) as f:
        f.write(json.dumps({"dataset": "nadir", "version": 1, "energy_unit": "kcal/mol",
                            "length_unit": "angstrom"}) + "\n")
        for k in order:
            v = mols[k]
            # every minimum first, then the other stages in turn, so the
            # subset keeps both relative conformer energies and strained
            # structures with large forces
            pick = [r for r in v if r.get("tag") == "minimum"]
            queues = defaultdict(list)
            for r in v:
                if r.get("tag") != "minimum":
                    queues[r.get("tag")].append(r)
            tags = sorted(queues)
            while any(queues[t] for t in tags):
                for t in tags:
                    if queues[t]:
                        pick.append(queues[t].pop(0))
            for r in pick[:per]:
                o = {"key": r["key"], "elements": r["elements"],
                     "coordinates": [round(x, 5) for x in r["coordinates"]],
                     "energy": round(r["energy"], 5)}
                if r.get("forces"):
                    o["forces"] = [round(x, 4) for x in r["forces"]]
                for m in ("charge", "multiplicity", "source", "tag"):
                    if m in r:
                        o[m] = r[m]
                f.write(json.dumps(o, separators=(",", ":")) + "\n")
                n += 1
    os.replace(tmp, path)
    return n


def main():
    args = sys.argv[1:]
    if not args or args[0] in ("-h", "--help"):
        sys.stdout.write(__doc__)
        return
    work = args[0]
    sets = opt(args, "--sets", "train,test,large").split(",")
    per = int(opt(args, "--compact-per-molecule", "24"))
    out = {"work": os.path.abspath(work), "seconds": int(opt(args, "--seconds", "0")), "sets": {}}
    for s in sets:
        p = os.path.join(work, s + ".jsonl")
        if not os.path.exists(p):
            continue
        rows = read(p)
        d = summarise(rows)
        d["file"] = p
        d["audit"] = audits(os.path.join(work, "logs", "label.%s.log" % s))
        if s in ("test", "large") and rows:
            os.makedirs(os.path.join(work, "compact"), exist_ok=True)
            cp = os.path.join(work, "compact", s + ".jsonl.gz")
            d["compact"] = {"file": cp, "structures": compact(rows, cp, per),
                            "bytes": os.path.getsize(cp)}
        out["sets"][s] = d
        print("%-5s %5d molecules %7d structures (%.1f per molecule), %d-%d atoms" % (
            s, d["molecules"], d["structures"], d["structures_per_molecule"], *d["atoms_per_structure"]))
        print("      by stage: " + ", ".join("%s %d" % kv for kv in d["structures_by_tag"].items()))
        print("      atoms by element: " + ", ".join("%s %d" % kv for kv in d["atoms_by_element"].items()))
        print("      molecules with element: " + ", ".join("%s %d" % kv for kv in d["molecules_with_element"].items()))
        ea = d["energy_above_molecule_lowest_kcal_mol"]
        fc = d["force_component_kcal_mol_angstrom"]
        print("      energy/atom %.1f .. %.1f kcal/mol; above the molecule's lowest: median %.1f, 95%% %.1f, max %.1f"
              % (d["energy_per_atom_kcal_mol"][0], d["energy_per_atom_kcal_mol"][1], ea["median"], ea["p95"], ea["max"]))
        print("      force components %.1f .. %.1f kcal/mol/A, RMS %.2f" % (fc["min"], fc["max"], fc["rms"]))
        a = d["audit"]
        print("      audit: %d structures checked, %d ok, %d refused, worst |gradient - difference| %.4f kcal/mol/A"
              % (a["audited"], a["ok"], a["refused"], a["worst"]))
        if "compact" in d:
            print("      compact: %s (%d structures, %.1f MB)" % (d["compact"]["file"], d["compact"]["structures"],
                                                              d["compact"]["bytes"] / 1e6))
    out["timing"] = timings(os.path.join(work, "logs", "timing.txt"))
    if out["timing"]:
        print("measured wall time (all sets; relax/scan: structures relaxed or scan angles):")
        for k, v in out["timing"].items():
            print("      %-36s %7d  %8.0f s  %.3f s each" % (k, v["structures"], v["seconds"],
                                                          v["seconds_per_structure"] or 0))
    tmp = os.path.join(work, "summary.json.tmp")
    with open(tmp, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    os.replace(tmp, os.path.join(work, "summary.json"))
    print("summary written to %s" % os.path.join(work, "summary.json"))


if __name__ == "__main__":
    main()

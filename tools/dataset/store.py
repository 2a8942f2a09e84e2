#!/usr/bin/python3
"""Label store: the reference labels of a make-dataset run, packed small
enough to commit, so that a run started on one machine continues on the next
(labelling the full set takes longer than one working session, and machines
do not keep their disks).

  store.py save WORK STORE     pack what WORK holds that STORE lacks
  store.py load STORE WORK     put STORE's labels and run state into WORK
  store.py check STORE         read every pack, verify its checksum, count

STORE/SET/NNNN.ndpack (SET: train, test, large, basis) are append-only packs:
a save writes one new pack per set with the structures of WORK/SET.jsonl
whose "id" no earlier pack holds, so the packs already committed never
change.
STORE/state.tar.xz holds the run's small state files (done markers, split,
relaxation minima and reports, logs; not the regenerable inputs nor the
trajectories and the frames derived from them), rewritten by each save; load
extracts only the files WORK lacks.

Pack format ("nadir-label-pack", version 1), xz-compressed as a whole:
  line 1   JSON object: "format", "version", "records", "coordinate_step"
           (angstrom), "force_step" (kcal/mol/angstrom), "sha256" (of the
           binary part), "header" (the dataset file's header line)
  line 2   JSON array, one object per structure: "key", "elements" (one
           string, symbols joined by spaces), "energy" (kcal/mol, exact),
           "charge", "multiplicity", "id", and "source", "tag" when present,
           "forces" false when the structure has none
  binary   int32 little-endian, the coordinates of all structures then the
           forces, each as integer multiples of its step; a structure's
           coordinates are stored as the difference from the previous
           structure of the same key and elements in the pack (their
           conformers and displacements differ little, so the differences are
           small numbers), and each block is split into its four byte planes
           before compression.
Rounding: coordinates to 1e-5 A (moving a structure of 24 atoms by that
changes its energy by about 1e-3 kcal/mol for typical forces), forces to
1e-3 kcal/mol/A (the label audit finds the reference gradients consistent
with their energies to about 1e-2, so the rounding is below the labels' own
noise); energies and every other member are kept exactly. Measured: about
330 bytes per structure for conformers of the training molecules (24 atoms
on average), 13% less than with steps ten times finer.
"""
import hashlib
import io
import json
import lzma
import os
import re
import sys
import tarfile

import numpy as np

FORMAT, VERSION = "nadir-label-pack", 1
COORD_STEP, FORCE_STEP = 1e-5, 1e-3
SETS = ("train", "test", "large", "basis")
LIMIT = 2**31 - 1
# State kept across machines: everything under WORK but the program copy,
# the generated inputs (gen/, and the relaxation starts and chunks, rebuilt
# from them), files being written (hidden or .tmp), the datasets themselves
# (the packs hold them) and the bulky files derived from relaxations, which
# make-dataset.sh needs only until their labels are done, and the compact
# held-out sets (the summary stage rewrites them; tests/data/heldout/ keeps
# the committed copies).
SKIP_DIRS = ("bin", "gen", "compact")
SKIP_SUFFIXES = (".traj.xyz", ".frames.xyz", ".near.xyz", ".minima.xyz", ".jsonl", ".cache", ".tmp")
SKIP_NAME = re.compile(r"^(\.|start\.n\d+\.xyz$|chunk\d{4}-\d{2}\.xyz$)")


def fail(msg):
    sys.stderr.write("store: %s\n" % msg)
    sys.exit(1)


def read_jsonl(path):
    """Header object (or None) and the structure objects of a dataset file;
    a partial last line (a run still writing) is left out."""
    header, rows = None, []
    with open(path) as f:
        for n, line in enumerate(f, 1):
            if not line.endswith("\n") or not line.strip():
                continue
            try:
                obj = json.loads(line)
            except ValueError as e:
                fail("%s line %d: not JSON (%s)" % (path, n, e))
            if "elements" not in obj:
                if "dataset" in obj and header is None and not rows:
                    header = obj
                continue
            rows.append(obj)
    return header, rows


def flat(values, natoms, what, where):
    a = np.asarray(values, dtype=np.float64).reshape(-1)
    if a.size != 3 * natoms:
        fail("%s: %s has %d numbers for %d atoms" % (where, what, a.size, natoms))
    return a


def quantize(a, step, what, where):
    q = np.rint(a / step)
    if not np.all(np.isfinite(q)) or np.any(np.abs(q) > LIMIT):
        fail("%s: %s out of the packable range" % (where, what))
    return q.astype(np.int64)


def shuffle(ints):
    b = ints.astype("<i4").view(np.uint8).reshape(-1, 4)
    return b.T.copy().tobytes()


def unshuffle(data, count):
    b = np.frombuffer(data, dtype=np.uint8)
    if b.size != 4 * count:
        raise ValueError("block holds %d bytes, expected %d" % (b.size, 4 * count))
    return b.reshape(4, count).T.copy().view("<i4").reshape(-1).astype(np.int64)


def pack(rows, header):
    meta, coords, forces, last = [], [], [], {}
    for i, r in enumerate(rows):
        where = "structure %d (key %s)" % (i + 1, r.get("key"))
        els = r["elements"]
        n = len(els)
        x = quantize(flat(r["coordinates"], n, "coordinates", where), COORD_STEP, "coordinates", where)
        m = {"key": r["key"], "elements": " ".join(els), "energy": r["energy"],
             "charge": r.get("charge", 0), "multiplicity": r.get("multiplicity", 1), "id": r["id"]}
        for k in ("source", "tag"):
            if r.get(k) is not None:
                m[k] = r[k]
        ref = (r["key"], m["elements"])
        coords.append(x - last[ref] if ref in last else x)
        last[ref] = x
        if r.get("forces") is None:
            m["forces"] = False
        else:
            forces.append(quantize(flat(r["forces"], n, "forces", where), FORCE_STEP, "forces", where))
        meta.append(m)
    cx = np.concatenate(coords) if coords else np.zeros(0, np.int64)
    fx = np.concatenate(forces) if forces else np.zeros(0, np.int64)
    if np.any(np.abs(cx) > LIMIT):
        fail("coordinate differences out of the packable range")
    binary = shuffle(cx) + shuffle(fx)
    top = {"format": FORMAT, "version": VERSION, "records": len(meta), "coordinate_step": COORD_STEP,
           "force_step": FORCE_STEP, "coordinate_values": int(cx.size), "force_values": int(fx.size),
           "sha256": hashlib.sha256(binary).hexdigest(), "header": header}
    text = (json.dumps(top) + "\n" + json.dumps(meta, separators=(",", ":")) + "\n").encode()
    return lzma.compress(text + binary, preset=9 | lzma.PRESET_EXTREME)


def unpack(path):
    """Header and structure objects (dataset-line members) of one pack."""
    try:
        with open(path, "rb") as f:
            raw = lzma.decompress(f.read())
        nl1 = raw.index(b"\n")
        top = json.loads(raw[:nl1])
        nl2 = raw.index(b"\n", nl1 + 1)
        if top.get("format") != FORMAT:
            raise ValueError("not a label pack")
        if top.get("version") != VERSION:
            raise ValueError("version %r; this script reads version %d" % (top.get("version"), VERSION))
        meta = json.loads(raw[nl1 + 1:nl2])
        binary = raw[nl2 + 1:]
        if hashlib.sha256(binary).hexdigest() != top["sha256"]:
            raise ValueError("checksum mismatch (damaged or edited)")
        nc, nf = top["coordinate_values"], top["force_values"]
        cx = unshuffle(binary[:4 * nc], nc)
        fx = unshuffle(binary[4 * nc:], nf)
        if len(meta) != top["records"]:
            raise ValueError("holds %d records, header says %d" % (len(meta), top["records"]))
    except (OSError, ValueError, KeyError, lzma.LZMAError) as e:
        fail("%s: %s" % (path, e))
    rows, last, ic, jf = [], {}, 0, 0
    for m in meta:
        els = m["elements"].split()
        n3 = 3 * len(els)
        ref = (m["key"], m["elements"])
        x = cx[ic:ic + n3] + (last[ref] if ref in last else 0)
        last[ref] = x
        ic += n3
        r = {"key": m["key"], "elements": els, "coordinates": [round(v * COORD_STEP, 5) for v in x.tolist()],
             "energy": m["energy"]}
        if m.get("forces", True) is not False:
            r["forces"] = [round(v * FORCE_STEP, 3) for v in fx[jf:jf + n3].tolist()]
            jf += n3
        r["charge"], r["multiplicity"], r["id"] = m["charge"], m["multiplicity"], m["id"]
        for k in ("source", "tag"):
            if k in m:
                r[k] = m[k]
        rows.append(r)
    if ic != cx.size or jf != fx.size:
        fail("%s: the binary part does not match the records" % path)
    return top["header"], rows


def packs(store, s):
    d = os.path.join(store, s)
    if not os.path.isdir(d):
        return []
    return sorted(os.path.join(d, f) for f in os.listdir(d) if f.endswith(".ndpack"))


def stored_ids(store, s):
    ids = set()
    for p in packs(store, s):
        ids.update(r["id"] for r in unpack(p)[1])
    return ids


def save(work, store):
    for s in SETS:
        path = os.path.join(work, s + ".jsonl")
        if not os.path.exists(path):
            continue
        header, rows = read_jsonl(path)
        have = stored_ids(store, s)
        new = [r for r in rows if r["id"] not in have]
        if not new:
            print("store: %s: nothing new (%d stored)" % (s, len(have)))
            continue
        os.makedirs(os.path.join(store, s), exist_ok=True)
        prev = packs(store, s)
        num = int(os.path.basename(prev[-1]).split(".")[0]) + 1 if prev else 1
        out = os.path.join(store, s, "%04d.ndpack" % num)
        data = pack(new, header)
        with open(out + ".tmp", "wb") as f:
            f.write(data)
        os.replace(out + ".tmp", out)
        # read back before trusting it
        _, back = unpack(out)
        if len(back) != len(new) or any(a["id"] != b["id"] or a["energy"] != b["energy"]
                                         for a, b in zip(new, back)):
            fail("%s: read-back differs from what was packed" % out)
        print("store: %s: %d new structures -> %s (%.0f bytes each)"
              % (s, len(new), out, len(data) / len(new)))
    save_state(work, store)


def state_files(work):
    for d, dirs, files in os.walk(work):
        rel = os.path.relpath(d, work)
        if rel == ".":
            dirs[:] = [x for x in dirs if x not in SKIP_DIRS]
        for f in sorted(files):
            if not f.endswith(SKIP_SUFFIXES) and not SKIP_NAME.match(f):
                yield os.path.normpath(os.path.join(rel, f))


def save_state(work, store):
    buf = io.BytesIO()
    with tarfile.open(fileobj=buf, mode="w:xz") as tar:
        for rel in sorted(state_files(work)):
            info = tar.gettarinfo(os.path.join(work, rel), arcname=rel)
            info.mtime, info.uid, info.gid, info.uname, info.gname = 0, 0, 0, "", ""
            with open(os.path.join(work, rel), "rb") as f:
                tar.addfile(info, f)
    out = os.path.join(store, "state.tar.xz")
    os.makedirs(store, exist_ok=True)
    with open(out + ".tmp", "wb") as f:
        f.write(buf.getvalue())
    os.replace(out + ".tmp", out)
    print("store: run state -> %s (%d bytes)" % (out, len(buf.getvalue())))


def write_jsonl(path, header, rows):
    with open(path + ".tmp", "w") as f:
        f.write(json.dumps(header or {"dataset": "nadir", "version": 1, "energy_unit": "kcal/mol",
                                      "length_unit": "angstrom"}) + "\n")
        for r in rows:
            f.write(json.dumps(r) + "\n")
    os.replace(path + ".tmp", path)


def load(store, work):
    os.makedirs(work, exist_ok=True)
    for s in SETS:
        ps = packs(store, s)
        if not ps:
            continue
        path = os.path.join(work, s + ".jsonl")
        header, have = (read_jsonl(path) if os.path.exists(path) else (None, []))
        ids = {r["id"] for r in have}
        added, stored = [], 0
        for p in ps:
            h, rows = unpack(p)
            header = header or h
            stored += len(rows)
            added.extend(r for r in rows if r["id"] not in ids)
            ids.update(r["id"] for r in rows)
        if added:
            write_jsonl(path, header, have + added)
        print("store: %s: %d structures in %d packs, %d of them new to %s (now %d)"
              % (s, stored, len(ps), len(added), path, len(have) + len(added)))
    state = os.path.join(store, "state.tar.xz")
    if os.path.exists(state):
        n = 0
        with tarfile.open(state, "r:xz") as tar:
            for m in tar.getmembers():
                target = os.path.normpath(os.path.join(work, m.name))
                if not m.isfile() or m.name.startswith(("/", "..")) or not target.startswith(
                        os.path.normpath(work) + os.sep):
                    fail("%s: unexpected member '%s'" % (state, m.name))
                if os.path.exists(target):
                    continue
                os.makedirs(os.path.dirname(target), exist_ok=True)
                with tar.extractfile(m) as src, open(target, "wb") as dst:
                    dst.write(src.read())
                n += 1
        print("store: run state: %d files restored into %s" % (n, work))


def check(store):
    total = 0
    for s in SETS:
        ps = packs(store, s)
        n = sum(len(unpack(p)[1]) for p in ps)
        size = sum(os.path.getsize(p) for p in ps)
        if ps:
            print("store: %s: %d structures in %d packs, %d bytes" % (s, n, len(ps), size))
        total += n
    print("store: %d structures in all" % total)


def main(argv):
    if len(argv) >= 1 and argv[0] in ("-h", "--help"):
        sys.stdout.write(__doc__)
        return 0
    if len(argv) == 3 and argv[0] == "save":
        save(argv[1], argv[2])
    elif len(argv) == 3 and argv[0] == "load":
        load(argv[1], argv[2])
    elif len(argv) == 2 and argv[0] == "check":
        check(argv[1])
    else:
        sys.stderr.write("usage: store.py save WORK STORE | load STORE WORK | check STORE (see --help)\n")
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

#!/usr/bin/python3
"""Geometry helpers of the training-set pipeline (tools/make-dataset.sh).

Every output is written to a temporary name and renamed, so an interrupted
run never leaves a half-written file; every random choice is seeded from
(--seed, molecule key, structure index), so the same input gives the same
structures whatever the order or the subset of molecules.

  split SMALL.smi OUTDIR --seed S --test-fraction F
        molecule split: OUTDIR/train.smi and OUTDIR/test.smi (whole molecules)
  head IN.smi OUT.smi N
        the first N molecules of a list (N <= 0: all)
  torsions IN.sdf OUT.xyz --per-molecule N --seed S
        torsion-varied shapes: rotate rotatable bonds of each molecule's
        conformers by random angles, reject clashes
  thermal IN.xyz OUT.xyz --per-structure N --seed S [--heavy A] [--hydrogen A]
        Gaussian displacements as if by thermal motion
  frames TRAJ.xyz OUT.xyz --every K [--final FINAL.xyz]
        every K-th frame of relaxation paths (titles set to the molecule key)
  retitle IN.xyz OUT.xyz
        frames with the title cut to its first word (the molecule key)
  pick IN.sdf OUT.xyz --per-molecule N [--skip K]
        the first N conformers of each molecule (after the first K)
  scan-setup IN.sdf OUTDIR --fraction F --seed S
        choose molecules and one rotatable torsion (I,J,K,L) each for scans
  rotors IN.xyz OUT.xyz [--step DEG]
        the hydrogens of every O-H, N-H and S-H rotor (a heteroatom with one
        heavy neighbour) of each structure turned about that bond, one rotor
        at a time, by every multiple of DEG (30) short of a full turn;
        shapes with a clash dropped
"""
import math
import os
import re
import sys
import zlib

import numpy as np

COVALENT = {"H": 0.31, "C": 0.76, "N": 0.71, "O": 0.66, "F": 0.57, "S": 1.05, "Cl": 1.02}


def die(msg):
    sys.stderr.write("structures.py: %s\n" % msg)
    sys.exit(1)


def rng_for(seed, key, index, salt):
    """Per-item generator: independent of the order and subset of molecules."""
    return np.random.default_rng([int(seed), zlib.crc32(key.encode()), int(index), zlib.crc32(salt.encode())])


def write_atomic(path, text):
    tmp = path + ".tmp"
    with open(tmp, "w") as f:
        f.write(text)
    os.replace(tmp, path)


def read_smi(path):
    out = []
    with open(path) as f:
        for line in f:
            s = line.split()
            if s:
                out.append((s[0], s[1] if len(s) > 1 else s[0]))
    return out


def read_sdf(path):
    """Records of a V2000 SD file: dict(title, elements, xyz (n,3), bonds [(i,j,order)], data)."""
    recs = []
    with open(path) as f:
        blocks = f.read().split("$$$$")
    for blk in blocks:
        lines = blk.split("\n")
        if lines and lines[0] == "":
            lines = lines[1:]  # the newline after the previous '$$$$'
        if len(lines) < 4 or not lines[3].strip():
            continue
        title = lines[0].strip()
        counts = lines[3]
        na, nb = int(counts[0:3]), int(counts[3:6])
        els, xyz, bonds = [], [], []
        for a in range(na):
            l = lines[4 + a]
            xyz.append((float(l[0:10]), float(l[10:20]), float(l[20:30])))
            els.append(l[31:34].strip())
        for b in range(nb):
            l = lines[4 + na + b]
            bonds.append((int(l[0:3]) - 1, int(l[3:6]) - 1, int(l[6:9])))
        data = {}
        j = 4 + na + nb
        while j < len(lines):
            if lines[j].startswith(">") and "<" in lines[j] and j + 1 < len(lines):
                data[lines[j].split("<", 1)[1].split(">", 1)[0]] = lines[j + 1].strip()
                j += 1
            j += 1
        recs.append({"title": title, "elements": els, "xyz": np.array(xyz), "bonds": bonds, "data": data})
    return recs


def read_xyz(path):
    """Frames of a multi-frame XYZ file: list of (title, elements, xyz (n,3))."""
    frames = []
    with open(path) as f:
        lines = f.read().split("\n")
    i = 0
    while i < len(lines):
        if not lines[i].strip():
            i += 1
            continue
        n = int(lines[i])
        title = lines[i + 1].strip()
        els, xyz = [], []
        for l in lines[i + 2:i + 2 + n]:
            p = l.split()
            els.append(p[0])
            xyz.append([float(v) for v in p[1:4]])
        frames.append((title, els, np.array(xyz)))
        i += 2 + n
    return frames


def xyz_text(title, els, xyz):
    out = ["%d" % len(els), title]
    for e, (x, y, z) in zip(els, xyz):
        out.append("%-2s %15.8f %15.8f %15.8f" % (e, x, y, z))
    return "\n".join(out) + "\n"


def group_by_title(items, title_of):
    groups = {}
    order = []
    for it in items:
        t = title_of(it)
        if t not in groups:
            groups[t] = []
            order.append(t)
        groups[t].append(it)
    return order, groups


# ---------------------------------------------------------------- split

def cmd_split(args):
    src, outdir = args[0], args[1]
    seed = int(opt(args, "--seed", "1"))
    frac = float(opt(args, "--test-fraction", "0.1"))
    mols = read_smi(src)
    rng = np.random.default_rng([seed, 9009])
    perm = rng.permutation(len(mols))
    ntest = int(round(frac * len(mols)))
    if frac > 0 and len(mols) >= 2:
        ntest = max(1, ntest)
    test = sorted(perm[:ntest].tolist())
    train = perm[ntest:].tolist()  # training order shuffled: any prefix is a random subset
    test_set = [mols[i] for i in rng.permutation(test)]
    os.makedirs(outdir, exist_ok=True)
    write_atomic(os.path.join(outdir, "train.smi"), "".join("%s %s\n" % m for m in (mols[i] for i in train)))
    write_atomic(os.path.join(outdir, "test.smi"), "".join("%s %s\n" % m for m in test_set))
    sys.stderr.write("split: %d molecules -> %d train, %d test (seed %d)\n" % (len(mols), len(train), ntest, seed))


def cmd_head(args):
    src, dst, n = args[0], args[1], int(args[2])
    mols = read_smi(src)
    if n > 0:
        mols = mols[:n]
    write_atomic(dst, "".join("%s %s\n" % m for m in mols))


# ---------------------------------------------------------------- topology

def adjacency(n, bonds):
    adj = [[] for _ in range(n)]
    for i, j, _ in bonds:
        adj[i].append(j)
        adj[j].append(i)
    return adj


def side(adj, a, b):
    """Atoms reachable from b without crossing the bond a-b (None if a ring bond)."""
    seen = {b}
    stack = [b]
    while stack:
        u = stack.pop()
        for v in adj[u]:
            if u == b and v == a:
                continue
            if v == a:
                return None
            if v not in seen:
                seen.add(v)
                stack.append(v)
    return seen


def topo_distances(adj, n, cap=4):
    d = np.full((n, n), cap, dtype=int)
    for s in range(n):
        d[s, s] = 0
        frontier = [s]
        k = 0
        while frontier and k < cap - 1:
            k += 1
            nxt = []
            for u in frontier:
                for v in adj[u]:
                    if d[s, v] > k:
                        d[s, v] = k
                        nxt.append(v)
            frontier = nxt
    return d


def rotatable(rec):
    """Rotatable bonds: single, not in a ring, neither end terminal.
    Returns [(a, b, moving_atoms, conjugated)] with the smaller side moving."""
    els, bonds = rec["elements"], rec["bonds"]
    n = len(els)
    adj = adjacency(n, bonds)
    multiple = set()
    for i, j, o in bonds:
        if o != 1:
            multiple.add(i)
            multiple.add(j)
    out = []
    for i, j, o in bonds:
        if o != 1 or len(adj[i]) < 2 or len(adj[j]) < 2:
            continue
        s = side(adj, i, j)
        if s is None:
            continue
        a, b = i, j
        if len(s) > n - len(s):
            s = side(adj, j, i)
            a, b = j, i
        # a bond next to a double or aromatic bond with a lone-pair atom (amide,
        # ester, enol ether, aniline...) or between two sp2 atoms is
        # conjugated: planar, high barrier. It is flipped, not spun.
        lone = ("N", "O", "S")
        conj = (i in multiple and j in multiple) or (i in multiple and els[j] in lone) or \
               (j in multiple and els[i] in lone)
        out.append((a, b, sorted(s), conj))
    return out


def rotate(xyz, a, b, moving, angle):
    axis = xyz[b] - xyz[a]
    axis /= np.linalg.norm(axis)
    p = xyz[moving] - xyz[b]
    c, s = math.cos(angle), math.sin(angle)
    rot = p * c + np.cross(axis, p) * s + np.outer(p @ axis, axis) * (1 - c)
    out = xyz.copy()
    out[moving] = rot + xyz[b]
    return out


def clashes(els, xyz, far):
    """Any pair three or more bonds apart closer than 0.9 times the sum of
    their covalent radii plus 0.8 A (H-H 1.36, C-H 1.76, C-C 2.17 A; common
    practice, no source). The pilot's looser 0.75 x + 0.5 A let through
    shapes up to 200 kcal/mol above the molecule's conformers."""
    r = np.array([COVALENT.get(e, 0.8) for e in els])
    lim = 0.9 * (r[:, None] + r[None, :]) + 0.8
    d = np.linalg.norm(xyz[:, None, :] - xyz[None, :, :], axis=2)
    return bool(np.any((d < lim) & far))


def cmd_torsions(args):
    src, dst = args[0], args[1]
    per = int(opt(args, "--per-molecule", "8"))
    seed = int(opt(args, "--seed", "1"))
    recs = read_sdf(src)
    order, groups = group_by_title(recs, lambda r: r["title"])
    out = []
    made = skipped = 0
    for key in order:
        confs = groups[key]
        rot = rotatable(confs[0])
        if not rot:
            skipped += 1
            continue
        n = len(confs[0]["elements"])
        adj = adjacency(n, confs[0]["bonds"])
        far = topo_distances(adj, n, cap=3) >= 3
        for k in range(per):
            rng = rng_for(seed, key, k, "torsions")
            base = confs[k % len(confs)]
            done = False
            for attempt in range(30):
                xyz = base["xyz"].copy()
                chosen = [t for t in rot if rng.random() < 0.7] or [rot[rng.integers(len(rot))]]
                for a, b, moving, conj in chosen:
                    if conj:
                        ang = (math.pi if rng.random() < 0.3 else 0.0) + rng.normal(0, math.radians(20))
                    else:
                        ang = rng.uniform(-math.pi, math.pi)
                    xyz = rotate(xyz, a, b, moving, ang)
                if not clashes(base["elements"], xyz, far):
                    done = True
                    break
            if done:
                out.append(xyz_text(key, base["elements"], xyz))
                made += 1
    write_atomic(dst, "".join(out))
    sys.stderr.write("torsions: %d structures for %d molecules (%d without rotatable bonds)\n"
                     % (made, len(order), skipped))


# ---------------------------------------------------------------- thermal

def cmd_thermal(args):
    """Gaussian displacements, each structure with its own amplitude scale
    drawn uniformly in [0.5, 1.3]: RMS per atom 0.05 A for heavy atoms and
    0.10 A for hydrogens at scale 1, about the size of thermal motion at
    300-600 K (common practice, no source). Measured with GFN2-xTB on a 26-atom
    molecule, 0.07/0.12 A put structures 30-150 kcal/mol above the conformer
    they came from, several times (3n-6) kT/2, hence the smaller values."""
    src, dst = args[0], args[1]
    per = int(opt(args, "--per-structure", "2"))
    seed = int(opt(args, "--seed", "1"))
    heavy = float(opt(args, "--heavy", "0.05"))
    hyd = float(opt(args, "--hydrogen", "0.10"))
    frames = read_xyz(src)
    count = {}
    out = []
    # the input's name tells conformers from torsion-varied shapes; the
    # molecule count in it (".n400.") is dropped so that a longer molecule
    # list gives the same displacements for the molecules already done
    salt = "thermal:" + re.sub(r"\.n\d+\.", ".", os.path.basename(src))
    for title, els, xyz in frames:
        key = title.split()[0] if title else "unnamed"
        idx = count.get(key, 0)
        count[key] = idx + 1
        rms = np.array([hyd if e == "H" else heavy for e in els])
        for k in range(per):
            rng = rng_for(seed, key, idx * 1000 + k, salt)
            scale = rng.uniform(0.5, 1.3)
            d = rng.normal(0.0, 1.0, size=xyz.shape) * (scale * rms / math.sqrt(3.0))[:, None]
            out.append(xyz_text(key, els, xyz + d))
    write_atomic(dst, "".join(out))
    sys.stderr.write("thermal: %d structures from %d\n" % (len(out), len(frames)))


# ---------------------------------------------------------------- paths

def cmd_frames(args):
    src, dst = args[0], args[1]
    every = int(opt(args, "--every", "5"))
    frames = read_xyz(src)
    out = []
    # frames of one record run from "frame 0"; keep 1, 1+k, 1+2k, ... (frame 0
    # is the starting conformer, labelled already) but not the record's last
    # frame: the relaxed end comes from the optimiser's output file and is
    # labelled as a minimum.
    def fno(title):
        parts = title.split()
        try:
            return int(parts[parts.index("frame") + 1])
        except (ValueError, IndexError):
            return 0
    nums = [fno(t) for t, _, _ in frames]
    for i, (title, els, xyz) in enumerate(frames):
        last = i + 1 == len(frames) or nums[i + 1] == 0
        if nums[i] >= 1 and (nums[i] - 1) % every == 0 and not last:
            out.append(xyz_text(title.split()[0], els, xyz))
    write_atomic(dst, "".join(out))
    sys.stderr.write("frames: %d of %d frames kept\n" % (len(out), len(frames)))


def cmd_retitle(args):
    """Copies XYZ frames with the title cut to its first word (the key)."""
    src, dst = args[0], args[1]
    out = [xyz_text(t.split()[0] if t else "unnamed", e, x) for t, e, x in read_xyz(src)]
    write_atomic(dst, "".join(out))


def cmd_pick(args):
    src, dst = args[0], args[1]
    per = int(opt(args, "--per-molecule", "1"))
    skip = int(opt(args, "--skip", "0"))  # those relaxed by an earlier run
    recs = read_sdf(src)
    order, groups = group_by_title(recs, lambda r: r["title"])
    out = []
    for key in order:
        for r in groups[key][skip:skip + per]:
            out.append(xyz_text(key, r["elements"], r["xyz"]))
    write_atomic(dst, "".join(out))


def cmd_scan_setup(args):
    """Molecules (a seeded fraction with a non-conjugated rotatable bond
    between two heavy atoms) and one torsion each: writes OUTDIR/scans.txt,
    lines 'KEY I,J,K,L' (1-based), and OUTDIR/KEY.xyz starting structures."""
    src, outdir = args[0], args[1]
    frac = float(opt(args, "--fraction", "0.1"))
    seed = int(opt(args, "--seed", "1"))
    recs = read_sdf(src)
    order, groups = group_by_title(recs, lambda r: r["title"])
    os.makedirs(outdir, exist_ok=True)
    lines = []
    for key in order:
        rng = rng_for(seed, key, 0, "scan")
        if rng.random() >= frac:
            continue
        r = groups[key][0]
        els = r["elements"]
        adj = adjacency(len(els), r["bonds"])
        cand = [(a, b) for a, b, mv, conj in rotatable(r) if not conj and els[a] != "H" and els[b] != "H"]
        cand = [(a, b) for a, b in cand
                if any(els[v] != "H" for v in adj[a] if v != b) and any(els[v] != "H" for v in adj[b] if v != a)]
        if not cand:
            continue
        a, b = cand[rng.integers(len(cand))]
        i = min(v for v in adj[a] if v != b and els[v] != "H")
        l = min(v for v in adj[b] if v != a and els[v] != "H")
        lines.append("%s %d,%d,%d,%d\n" % (key, i + 1, a + 1, b + 1, l + 1))
        write_atomic(os.path.join(outdir, key + ".xyz"), xyz_text(key, els, r["xyz"]))
    write_atomic(os.path.join(outdir, "scans.txt"), "".join(lines))
    sys.stderr.write("scan-setup: %d torsion scans chosen from %d molecules\n" % (len(lines), len(order)))


def perceive_bonds(els, xyz):
    """Bonds of a relaxed structure from distances: closer than 1.2 times
    the sum of covalent radii (common practice, no source). Returns the
    adjacency lists."""
    r = np.array([COVALENT.get(e, 0.8) for e in els])
    d = np.linalg.norm(xyz[:, None, :] - xyz[None, :, :], axis=2)
    near = (d < 1.2 * (r[:, None] + r[None, :])) & ~np.eye(len(els), dtype=bool)
    return [[int(j) for j in np.nonzero(row)[0]] for row in near]


def cmd_rotors(args):
    """The stage `rotors` of make-dataset.sh. The torsion-varied shapes
    turn only bonds with heavy atoms on both ends, so hydroxyl, amino and
    thiol hydrogens were never turned; a model trained without such shapes
    put the O-H torsion barrier of acetic acid at half the reference's."""
    src, dst = args[0], args[1]
    step = float(opt(args, "--step", "30"))
    if not 0 < step < 360:
        die("--step must lie between 0 and 360 degrees")
    out = []
    rotors = dropped = 0
    for title, els, xyz in read_xyz(src):
        key = title.split()[0] if title else "unnamed"
        adj = perceive_bonds(els, xyz)
        far = topo_distances(adj, len(els), cap=3) >= 3
        for x, nb in enumerate(adj):
            hs = [j for j in nb if els[j] == "H"]
            heavy = [j for j in nb if els[j] != "H"]
            if els[x] not in ("O", "N", "S") or not hs or len(heavy) != 1:
                continue
            rotors += 1
            k = 1
            while k * step < 360 - 1e-9:
                turned = rotate(xyz, heavy[0], x, hs, math.radians(k * step))
                k += 1
                if clashes(els, turned, far):
                    dropped += 1
                    continue
                out.append(xyz_text(key, els, turned))
    write_atomic(dst, "".join(out))
    sys.stderr.write("rotors: %d shapes of %d rotors (%d dropped for a clash)\n"
                     % (len(out), rotors, dropped))


def opt(args, name, default):
    if name in args:
        i = args.index(name)
        if i + 1 >= len(args):
            die("%s needs a value" % name)
        return args[i + 1]
    return default


def main():
    if len(sys.argv) < 2 or sys.argv[1] in ("-h", "--help"):
        sys.stdout.write(__doc__)
        return
    cmds = {"split": cmd_split, "head": cmd_head, "torsions": cmd_torsions, "thermal": cmd_thermal,
            "frames": cmd_frames, "retitle": cmd_retitle, "pick": cmd_pick, "scan-setup": cmd_scan_setup,
            "rotors": cmd_rotors}
    c = sys.argv[1]
    if c not in cmds:
        die("unknown command '%s' (see --help)" % c)
    cmds[c](sys.argv[2:])


if __name__ == "__main__":
    main()

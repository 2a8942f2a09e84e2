#!/usr/bin/python3
"""Generates the molecule lists for nadir's training and test sets by joining
fragments: diverse neutral closed-shell molecules of H, C, N, O, F, S and Cl.

  tools/make-molecules.py [--seed S] [--small N] [--large N] [--explore N] [--out DIR]

writes DIR/small.smi (N molecules, 3 to 14 heavy atoms; default 2400),
DIR/large.smi (N molecules, 20 to 40 heavy atoms, at least 6 rotatable bonds;
default 60) and DIR/explore.smi (N molecules, default 400, alternately of
6-14 and of 15-24 heavy atoms: the molecules of the active-learning rounds of
tools/active-learning.sh, none of them in small.smi, large.smi or
tools/molecules/basis.smi, so they probe molecules the model was neither
trained nor tested on, half of them larger than any training molecule),
one "SMILES name" per line, and prints a summary of sizes and functional
groups to stderr. DIR defaults to tools/molecules. Same seed, same files;
explore.smi comes from its own random stream (seeded by S and "explore"), so
adding it left small.smi and large.smi unchanged.

How it works (our own scheme):
- Fragments are written in a small Kekule SMILES subset (organic atoms,
  - = #, branches, ring digits) and parsed by this script. Each has a kind:
  an aromatic ring, a saturated or partly saturated ring, or a substituent
  whose first atom is the one that bonds.
- A molecule starts from a random fragment and grows: pick an atom with an
  implicit hydrogen, pick a fragment (and, for rings, one of its atoms with
  a hydrogen), and join them with a single bond, replacing one hydrogen on
  each side. Joins never make rings, so ring membership comes from the
  fragments.
- A join is refused when it would make a group that is unstable or unusual
  in drug-like molecules: a bond between two heteroatoms; N, O or S on a
  carbon of a non-aromatic C=C (enols, enamines); a halogen on a C=O or
  C=N carbon (acyl halides); any heteroatom on a carbon with a triple bond
  (cyanates, cyanamides, ynamines, haloalkynes); sulfur on a carbonyl carbon
  (thioesters, acyl sulfones); a second heteroatom on an sp3 carbon that
  already carries one (hemiaminals, aminals, alpha-halo ethers; CF2 and CF3
  are allowed); a second single-bonded heteroatom on a carbonyl carbon that
  already has one (carbamic acids, carbonates). These rules are our choice
  (common practice, no source).
- Valences are checked on every molecule written: C 4, N 3, O 2, F 1, Cl 1,
  S 2, 4 or 6, all neutral, hydrogen counts implicit. Each SMILES written is
  parsed back by this script and must give the same graph.
- Molecules are told apart by a Weisfeiler-Lehman style hash of the heavy
  atom graph (element, hydrogens, ring aromaticity; aromatic ring bonds
  treated as one kind whatever their Kekule order), so two Kekule forms of
  one molecule count once.
"""
import argparse
import os
import random
import sys
from collections import Counter

VALENCES = {"C": (4,), "N": (3,), "O": (2,), "F": (1,), "Cl": (1,), "S": (2, 4, 6)}
HETERO = {"N", "O", "S", "F", "Cl"}
HALOGEN = {"F", "Cl"}

# (name, kind, Kekule SMILES, weight). kind: "arom" ring, "ring" non-aromatic
# ring, "sub" substituent (bonds through its first atom), group = the
# functional group it brings, for the summary.
FRAGMENTS = [
    # aromatic and heteroaromatic rings
    ("benzene", "arom", "C1=CC=CC=C1", 10),
    ("pyridine", "arom", "C1=CC=NC=C1", 5),
    ("pyrimidine", "arom", "C1=CN=CN=C1", 2),
    ("pyrazine", "arom", "C1=CN=CC=N1", 1.5),
    ("pyrrole", "arom", "N1C=CC=C1", 1.5),
    ("furan", "arom", "O1C=CC=C1", 1.5),
    ("thiophene", "arom", "S1C=CC=C1", 2),
    ("imidazole", "arom", "N1C=NC=C1", 1.5),
    ("pyrazole", "arom", "N1N=CC=C1", 1.5),
    ("oxazole", "arom", "O1C=NC=C1", 1),
    ("thiazole", "arom", "S1C=NC=C1", 1.5),
    ("isoxazole", "arom", "O1N=CC=C1", 1),
    ("triazole", "arom", "N1N=CN=C1", 0.7),
    # saturated rings
    ("cyclopropane", "ring", "C1CC1", 2),
    ("cyclobutane", "ring", "C1CCC1", 1),
    ("cyclopentane", "ring", "C1CCCC1", 2),
    ("cyclohexane", "ring", "C1CCCCC1", 3),
    ("cyclohexene", "ring", "C1=CCCCC1", 0.7),
    ("pyrrolidine", "ring", "N1CCCC1", 2),
    ("piperidine", "ring", "N1CCCCC1", 3),
    ("piperazine", "ring", "N1CCNCC1", 2),
    ("morpholine", "ring", "O1CCNCC1", 2),
    ("oxolane", "ring", "O1CCCC1", 1.5),
    ("oxane", "ring", "O1CCCCC1", 1.5),
    ("oxetane", "ring", "O1CCC1", 0.7),
    ("azetidine", "ring", "N1CCC1", 0.7),
    ("thiolane", "ring", "S1CCCC1", 0.7),
    ("dioxane", "ring", "O1CCOCC1", 0.5),
    ("lactam", "ring", "N1C(=O)CCC1", 0.7),
    # substituents
    ("methyl", "sub", "C", 8), ("ethyl", "sub", "CC", 4), ("propyl", "sub", "CCC", 2),
    ("isopropyl", "sub", "C(C)C", 2), ("tert-butyl", "sub", "C(C)(C)C", 1),
    ("hydroxy", "sub", "O", 4), ("methoxy", "sub", "OC", 3), ("ethoxy", "sub", "OCC", 1.5),
    ("hydroxymethyl", "sub", "CO", 2), ("methoxymethyl", "sub", "COC", 1.5),
    ("amino", "sub", "N", 3), ("methylamino", "sub", "NC", 2), ("dimethylamino", "sub", "N(C)C", 2),
    ("aminomethyl", "sub", "CN", 2), ("aminoethyl", "sub", "CCN", 1),
    ("carboxamide", "sub", "C(=O)N", 2.5), ("methylcarboxamide", "sub", "C(=O)NC", 2),
    ("dimethylcarboxamide", "sub", "C(=O)N(C)C", 1.5), ("acetamido", "sub", "NC(=O)C", 2.5),
    ("formamido", "sub", "NC=O", 0.7),
    ("methyl ester", "sub", "C(=O)OC", 2), ("ethyl ester", "sub", "C(=O)OCC", 1),
    ("acetoxy", "sub", "OC(=O)C", 1.5),
    ("carboxylic acid", "sub", "C(=O)O", 2.5),
    ("acetyl", "sub", "C(=O)C", 2.5), ("formyl", "sub", "C=O", 1),
    ("nitrile", "sub", "C#N", 2.5),
    ("sulfonamide", "sub", "S(=O)(=O)N", 2), ("methylsulfonamide", "sub", "S(=O)(=O)NC", 1.5),
    ("mesylamino", "sub", "NS(=O)(=O)C", 1.5),
    ("methylsulfonyl", "sub", "S(=O)(=O)C", 2.5),
    ("methylthio", "sub", "SC", 2.5), ("ethylthio", "sub", "SCC", 1),
    ("fluoro", "sub", "F", 4), ("chloro", "sub", "Cl", 4), ("trifluoromethyl", "sub", "C(F)(F)F", 2),
    ("urea", "sub", "NC(=O)N", 1), ("carbamate", "sub", "NC(=O)OC", 1),
    ("vinyl", "sub", "C=C", 0.7), ("ethynyl", "sub", "C#C", 0.7),
]


class Mol:
    """Heavy-atom graph: elements, bonds (i, j, order), per-atom ring kind
    (None, "ring", "arom"), per-bond aromatic flag."""

    def __init__(self):
        self.el = []
        self.ring = []
        self.adj = []          # list of dict: neighbour -> order
        self.arom_bond = set()  # frozenset({i, j}) of aromatic ring bonds
        self.groups = []        # fragment names, for information

    def add_atom(self, el, ring=None):
        self.el.append(el)
        self.ring.append(ring)
        self.adj.append({})
        return len(self.el) - 1

    def add_bond(self, i, j, order, arom=False):
        if i == j or j in self.adj[i]:
            raise ValueError("bad bond %d-%d" % (i, j))
        self.adj[i][j] = order
        self.adj[j][i] = order
        if arom:
            self.arom_bond.add(frozenset((i, j)))

    def n(self):
        return len(self.el)

    def bond_sum(self, i):
        return sum(self.adj[i].values())

    def hcount(self, i):
        s = self.bond_sum(i)
        for v in VALENCES[self.el[i]]:
            if v >= s:
                return v - s
        return -1

    def copy(self):
        m = Mol()
        m.el = list(self.el)
        m.ring = list(self.ring)
        m.adj = [dict(a) for a in self.adj]
        m.arom_bond = set(self.arom_bond)
        m.groups = list(self.groups)
        return m


def parse_smiles(s, ring_kind=None):
    """Parses our Kekule subset: atoms C N O S F Cl (no brackets, no
    lowercase), bonds - = #, branches, ring-closure digits and %nn.
    ring_kind marks the atoms that take part in ring closures' rings; for
    "arom", bonds between two ring atoms are flagged aromatic."""
    m = Mol()
    stack, prev, order = [], None, 1
    opened = {}
    ring_bonds = []
    i = 0
    while i < len(s):
        c = s[i]
        if c == "(":
            stack.append(prev)
            i += 1
        elif c == ")":
            prev = stack.pop()
            i += 1
        elif c in "-=#":
            order = {"-": 1, "=": 2, "#": 3}[c]
            i += 1
        elif c.isdigit() or c == "%":
            if c == "%":
                num, i = int(s[i + 1:i + 3]), i + 3
            else:
                num, i = int(c), i + 1
            if num in opened:
                a, o0 = opened.pop(num)
                o = max(order, o0)
                m.add_bond(a, prev, o)
                ring_bonds.append((a, prev))
            else:
                opened[num] = (prev, order)
            order = 1
        else:
            el = s[i:i + 2] if s[i:i + 2] == "Cl" else s[i]
            if el not in VALENCES:
                raise ValueError("unexpected '%s' in %s" % (el, s))
            a = m.add_atom(el)
            if prev is not None:
                m.add_bond(prev, a, order)
            prev, order = a, 1
            i += len(el)
    if opened or stack:
        raise ValueError("unclosed ring or branch in " + s)
    if ring_kind:
        # Ring atoms: those on a cycle (fragments here have one ring).
        cyc = ring_atoms(m)
        for a in cyc:
            m.ring[a] = ring_kind
        if ring_kind == "arom":
            for a in cyc:
                for b in m.adj[a]:
                    if b in cyc:
                        m.arom_bond.add(frozenset((a, b)))
    return m


def ring_atoms(m):
    """Atoms on a cycle: repeatedly strip atoms of degree <= 1."""
    deg = [len(a) for a in m.adj]
    alive = set(range(m.n()))
    changed = True
    while changed:
        changed = False
        for a in list(alive):
            if sum(1 for b in m.adj[a] if b in alive) <= 1:
                alive.discard(a)
                changed = True
    del deg
    return alive


def graph_from_smiles(smi):
    """The graph of a SMILES of our subset with the ring kinds perceived, so
    that wl_hash of it equals wl_hash of the molecule the generator built
    (whatever the Kekule form written). Joins never make rings, so every ring
    is one fragment's: the atoms left after cutting the acyclic bonds fall
    into single rings, and a ring with two or more double bonds inside it is
    aromatic (every aromatic fragment has two or three; cyclohexene one, the
    lactam none)."""
    m = parse_smiles(smi)
    core = ring_atoms(m)  # rings and the chains between them
    ring_adj = {a: [b for b in m.adj[a] if b in core and same_ring_bond(m, a, b)] for a in core}
    cyc = {a for a in core if ring_adj[a]}
    seen = set()
    for a in sorted(cyc):
        if a in seen:
            continue
        ring, todo = {a}, [a]
        while todo:
            for b in ring_adj[todo.pop()]:
                if b not in ring:
                    ring.add(b)
                    todo.append(b)
        seen |= ring
        doubles = sum(1 for x in ring for y, o in m.adj[x].items() if y in ring and o == 2) // 2
        kind = "arom" if doubles >= 2 else "ring"
        for x in ring:
            m.ring[x] = kind
            if kind == "arom":
                for y in m.adj[x]:
                    if y in ring:
                        m.arom_bond.add(frozenset((x, y)))
    return m


def write_smiles(m):
    """Depth-first SMILES of m (Kekule, organic subset, implicit H), and the
    atoms of m in the order the string writes them."""
    n = m.n()
    seen = [False] * n
    order_sym = {1: "", 2: "=", 3: "#"}
    # First pass: find ring-closure bonds (back edges of the DFS).
    parent = [-1] * n
    closures = {}
    visit = []

    def dfs1(a):
        seen[a] = True
        visit.append(a)
        for b in sorted(m.adj[a]):
            if not seen[b]:
                parent[b] = a
                dfs1(b)
            elif b != parent[a] and frozenset((a, b)) not in closures:
                closures[frozenset((a, b))] = None

    dfs1(0)
    if not all(seen):
        raise ValueError("disconnected molecule")
    digits = {}
    free = list(range(1, 100))
    at_atom = {a: [] for a in range(n)}
    for key in closures:
        a, b = sorted(key, key=visit.index)
        at_atom[a].append((key, b))
        at_atom[b].append((key, a))
    out = []
    done = [False] * n
    written = []

    def dfs2(a):
        done[a] = True
        written.append(a)
        out.append(m.el[a])
        for key, other in sorted(at_atom[a], key=lambda t: visit.index(t[1])):
            if key in digits:
                d = digits.pop(key)
                out.append(order_sym[m.adj[a][other]] + (str(d) if d < 10 else "%%%02d" % d))
                free.append(d)
                free.sort()
            else:
                d = free.pop(0)
                digits[key] = d
                out.append(str(d) if d < 10 else "%%%02d" % d)
        kids = [b for b in sorted(m.adj[a]) if parent[b] == a and not done[b]]
        for k, b in enumerate(kids):
            branch = k < len(kids) - 1
            if branch:
                out.append("(")
            out.append(order_sym[m.adj[a][b]])
            dfs2(b)
            if branch:
                out.append(")")

    dfs2(0)
    return "".join(out), written


def wl_hash(m, rounds=6):
    """Isomorphism-invariant hash of the heavy-atom graph."""
    lab = ["%s%d%s" % (m.el[a], m.hcount(a), {"arom": "a", "ring": "r", None: ""}[m.ring[a]])
           for a in range(m.n())]

    def blabel(a, b):
        return "a" if frozenset((a, b)) in m.arom_bond else str(m.adj[a][b])

    hist = [tuple(sorted(lab))]
    for _ in range(rounds):
        lab = [lab[a] + "(" + ",".join(sorted(blabel(a, b) + lab[b] for b in m.adj[a])) + ")"
               for a in range(m.n())]
        lab = [str(hash_str(s)) for s in lab]
        hist.append(tuple(sorted(lab)))
    return hash_str(repr(hist))


def hash_str(s):
    """A stable 64-bit FNV-1a hash (Python's hash() is salted per run)."""
    h = 0xcbf29ce484222325
    for ch in s.encode():
        h = ((h ^ ch) * 0x100000001b3) & 0xFFFFFFFFFFFFFFFF
    return h


def check_valence(m):
    for a in range(m.n()):
        s = m.bond_sum(a)
        h = m.hcount(a)
        if h < 0 or (s + h) not in VALENCES[m.el[a]]:
            return False
        if m.el[a] == "S" and s + h == 4:
            return False  # sulfoxide-like S is left out of this set
    return True


def is_carbonyl(m, a):
    return m.el[a] == "C" and any(m.el[b] in ("O", "S") and o == 2 for b, o in m.adj[a].items())


def nonarom_double(m, a, partner_els=("C", "N")):
    for b, o in m.adj[a].items():
        if o == 2 and m.el[b] in partner_els and frozenset((a, b)) not in m.arom_bond:
            return True
    return False


def join_ok(m, p, q):
    """Rules for a new single bond p-q already added to m (see the top)."""
    ep, eq = m.el[p], m.el[q]
    if ep != "C" and eq != "C":
        return False
    for x, y in ((p, q), (q, p)):
        ex = m.el[x]
        if ex not in HETERO or m.el[y] != "C":
            continue
        if ex in ("N", "O", "S") and nonarom_double(m, y, ("C",)):
            return False
        if ex in HALOGEN and (is_carbonyl(m, y) or nonarom_double(m, y, ("N",))):
            return False
        if any(o == 3 for o in m.adj[y].values()):
            return False  # cyanates, cyanamides, ynamines, haloalkynes
        if ex == "S" and is_carbonyl(m, y):
            return False  # thioesters, acyl sulfones
        others = [b for b in m.adj[y] if b != x and m.el[b] in HETERO and m.adj[y][b] == 1]
        sp3 = all(o == 1 for o in m.adj[y].values())
        if sp3 and others and not (ex == "F" and all(m.el[b] == "F" for b in others)):
            return False
        if is_carbonyl(m, y) and others:
            return False
    return True


def attach(m, frag, p, q, name):
    """New molecule: m plus frag, with a single bond from atom p of m to atom
    q of frag."""
    r = m.copy()
    off = r.n()
    for a in range(frag.n()):
        r.add_atom(frag.el[a], frag.ring[a])
    for a in range(frag.n()):
        for b, o in frag.adj[a].items():
            if a < b:
                r.add_bond(off + a, off + b, o, frozenset((a, b)) in frag.arom_bond)
    r.add_bond(p, off + q, 1)
    r.groups.append(name)
    return r, off + q


def rotatable_bonds(m):
    """Single, acyclic bonds between two atoms that each have another heavy
    neighbour, not next to a triple bond, not an amide C-N (common
    practice, no source)."""
    n = 0
    for a in range(m.n()):
        for b, o in m.adj[a].items():
            if b < a or o != 1:
                continue
            if m.ring[a] and m.ring[b] and same_ring_bond(m, a, b):
                continue
            if len(m.adj[a]) < 2 or len(m.adj[b]) < 2:
                continue
            if any(v == 3 for v in m.adj[a].values()) or any(v == 3 for v in m.adj[b].values()):
                continue
            if {m.el[a], m.el[b]} == {"C", "N"}:
                c = a if m.el[a] == "C" else b
                if is_carbonyl(m, c):
                    continue
            n += 1
    return n


def same_ring_bond(m, a, b):
    """1 if bond a-b lies on a cycle: removing it leaves a path a..b."""
    seen, todo = {a}, [a]
    while todo:
        x = todo.pop()
        for y in m.adj[x]:
            if (x, y) in ((a, b), (b, a)) or y in seen:
                continue
            if y == b:
                return True
            seen.add(y)
            todo.append(y)
    return False


def groups_of(m):
    """Functional groups present, perceived from the graph (for the summary)."""
    g = set()
    for a in range(m.n()):
        e, h, nb = m.el[a], m.hcount(a), m.adj[a]
        if m.ring[a] == "arom":
            ring_hetero = any(m.el[b] != "C" and m.ring[b] == "arom" for b in nb) or e != "C"
            g.add("heteroaromatic ring" if ring_hetero else "aromatic ring")
        if m.ring[a] == "ring":
            g.add("saturated ring")
        if e in HALOGEN:
            g.add("halide")
        if e == "C" and any(m.el[b] == "N" and o == 3 for b, o in nb.items()):
            g.add("nitrile")
        if e == "S":
            oxo = sum(1 for b, o in nb.items() if m.el[b] == "O" and o == 2)
            rest = [b for b, o in nb.items() if o == 1]
            if oxo == 2 and any(m.el[b] == "N" for b in rest):
                g.add("sulfonamide")
            elif oxo == 2:
                g.add("sulfone")
            elif oxo == 0 and m.ring[a] != "arom" and all(m.el[b] == "C" for b in rest) and len(rest) == 2:
                g.add("thioether")
        if is_carbonyl(m, a):
            single = [b for b, o in nb.items() if o == 1]
            hets = [b for b in single if m.el[b] in ("N", "O")]
            if any(m.el[b] == "N" for b in hets):
                g.add("amide")
            elif any(m.el[b] == "O" and m.hcount(b) == 1 for b in hets):
                g.add("carboxylic acid")
            elif any(m.el[b] == "O" for b in hets):
                g.add("ester")
            else:
                g.add("ketone or aldehyde")
        if e == "O" and all(o == 1 for o in nb.values()):
            if h == 1 and not any(is_carbonyl(m, b) for b in nb):
                g.add("alcohol")
            if h == 0 and len(nb) == 2 and not any(is_carbonyl(m, b) for b in nb):
                g.add("ether")
        if e == "N" and m.ring[a] != "arom" and all(o == 1 for o in nb.values()):
            if not any(is_carbonyl(m, b) or m.el[b] == "S" for b in nb):
                g.add("amine")
    return g


def grow(rng, frags, lo, hi, tries=60):
    """One random molecule with lo..hi heavy atoms, or None."""
    target = rng.randint(lo, hi)
    start = rng.choices(frags["all"], weights=frags["w"])[0]
    m = start[2].copy()
    m.groups.append(start[0])
    fails = 0
    while m.n() < target and fails < tries:
        sites = [a for a in range(m.n()) if m.hcount(a) > 0]
        if not sites:
            break
        p = rng.choice(sites)
        name, kind, f = rng.choices(frags["all"], weights=frags["w"])[0][:3]
        if m.n() + f.n() > hi:
            fails += 1
            continue
        qs = [0] if kind == "sub" else [a for a in range(f.n()) if f.hcount(a) > 0]
        if not qs or f.hcount(qs[0]) == 0 and kind == "sub":
            fails += 1
            continue
        q = rng.choice(qs)
        r, _ = attach(m, f, p, q, name)
        if not join_ok(r, p, m.n() + q) or not check_valence(r):
            fails += 1
            continue
        m = r
    if m.n() < lo:
        return None
    return m


def generate(rng, count, lo, hi, frags, extra=None, prefix="m"):
    seen = {}
    attempts = 0
    while len(seen) < count and attempts < count * 400:
        attempts += 1
        m = grow(rng, frags, lo, hi)
        if m is None or not check_valence(m):
            continue
        if extra and not extra(m):
            continue
        h = wl_hash(m)
        if h in seen:
            continue
        smi, order = write_smiles(m)
        back = parse_smiles(smi)
        # Carry ring flags over through the written order, then compare.
        pos = {a: k for k, a in enumerate(order)}
        back.ring = [m.ring[a] for a in order]
        back.arom_bond = {frozenset(pos[a] for a in b) for b in m.arom_bond}
        if wl_hash(back) != h or not check_valence(back):
            raise SystemExit("internal error: %s does not read back" % smi)
        seen[h] = (smi, m)
    if len(seen) < count:
        raise SystemExit("only %d distinct molecules after %d attempts" % (len(seen), attempts))
    out = []
    for k, (smi, m) in enumerate(seen.values()):
        out.append(("%s-%05d" % (prefix, k + 1), smi, m))
    return out


def summary(label, mols):
    sizes = Counter(m.n() for _, _, m in mols)
    groups = Counter(g for _, _, m in mols for g in groups_of(m))
    els = Counter(e for _, _, m in mols for e in set(m.el))
    sys.stderr.write("%s: %d molecules, heavy atoms %d..%d\n" % (label, len(mols), min(sizes), max(sizes)))
    sys.stderr.write("  sizes: " + " ".join("%d:%d" % (k, sizes[k]) for k in sorted(sizes)) + "\n")
    sys.stderr.write("  molecules containing: " + ", ".join("%s %d" % kv for kv in sorted(els.items())) + "\n")
    for g, c in sorted(groups.items(), key=lambda kv: -kv[1]):
        sys.stderr.write("  %-22s %5d\n" % (g, c))
    return groups


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=20261201)
    ap.add_argument("--small", type=int, default=2400)
    ap.add_argument("--large", type=int, default=60)
    ap.add_argument("--explore", type=int, default=400)
    ap.add_argument("--out", default=os.path.join(os.path.dirname(os.path.abspath(__file__)), "molecules"))
    a = ap.parse_args()
    rng = random.Random(a.seed)
    parsed = []
    for name, kind, smi, w in FRAGMENTS:
        f = parse_smiles(smi, kind if kind != "sub" else None)
        if not check_valence(f):
            raise SystemExit("fragment %s fails the valence check" % name)
        parsed.append((name, kind, f, w))
    frags = {"all": parsed, "w": [p[3] for p in parsed]}
    small = generate(rng, a.small, 3, 14, frags, prefix="small")
    rings_big = [p for p in parsed]
    wbig = [p[3] * (3 if p[1] != "sub" else 1) for p in parsed]

    def flexible(m):
        nr = sum(1 for g in m.groups if any(g == p[0] and p[1] != "sub" for p in parsed))
        return rotatable_bonds(m) >= 6 and 1 <= nr <= 4

    large = generate(rng, a.large, 20, 40, {"all": rings_big, "w": wbig}, extra=flexible, prefix="large")
    small_hash = {wl_hash(m) for _, _, m in small}
    if any(wl_hash(m) in small_hash for _, _, m in large):
        raise SystemExit("internal error: a large molecule is also in the small set")
    # The exploration list: its own stream, so small and large do not change
    # with it; none of its molecules in small, large or the basis list.
    taken = small_hash | {wl_hash(m) for _, _, m in large}
    # (basis.smi is hand-written and lives beside this script, whatever --out)
    basis = os.path.join(os.path.dirname(os.path.abspath(__file__)), "molecules", "basis.smi")
    taken |= {wl_hash(graph_from_smiles(l.split()[0])) for l in open(basis) if l.strip()}
    # Half of 6-14 heavy atoms (the training sizes), half of 15-24 (beyond
    # them), interleaved so that any first N of the list holds both.
    rng_x = random.Random("%d:explore" % a.seed)

    def fresh(m):
        return wl_hash(m) not in taken

    inside = generate(rng_x, (a.explore + 1) // 2, 6, 14, frags, extra=fresh, prefix="x") if a.explore > 0 else []
    beyond = generate(rng_x, a.explore // 2, 15, 24, frags, extra=fresh, prefix="x") if a.explore > 1 else []
    mixed = [t for pair in zip(inside, beyond) for t in pair] + inside[len(beyond):]
    explore = [("explore-%05d" % (k + 1), smi, m) for k, (_, smi, m) in enumerate(mixed)]
    os.makedirs(a.out, exist_ok=True)
    for fname, mols in (("small.smi", small), ("large.smi", large), ("explore.smi", explore)):
        if not mols and fname == "explore.smi":
            continue
        tmp = os.path.join(a.out, fname + ".tmp")
        with open(tmp, "w") as f:
            for name, smi, _ in mols:
                f.write("%s %s\n" % (smi, name))
        os.replace(tmp, os.path.join(a.out, fname))
    groups = summary("small.smi", small)
    summary("large.smi", large)
    rb = [rotatable_bonds(m) for _, _, m in large]
    sys.stderr.write("  large: rotatable bonds %d..%d\n" % (min(rb), max(rb)))
    if explore:
        summary("explore.smi", explore)
    missing = [g for g in ("amine", "amide", "ester", "carboxylic acid", "alcohol", "ether",
                           "ketone or aldehyde", "nitrile", "sulfonamide", "sulfone", "thioether",
                           "halide", "aromatic ring", "heteroaromatic ring", "saturated ring")
               if groups[g] < 50]
    if missing:
        raise SystemExit("too few small molecules with: " + ", ".join(missing))


if __name__ == "__main__":
    main()

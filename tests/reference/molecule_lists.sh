#!/bin/bash
# The committed molecule lists (tools/molecules/*.smi) against the program's
# own SMILES reader, which is independent of the generator's: every line
# reads, formulas hold only H C N O F S Cl, molecules are neutral, sizes are
# in range, names and SMILES are distinct; the hand-written basis list
# (always trained on) shares no molecule with the other two, as graphs, so
# nothing held out leaks into training through it; the exploration list of
# the active-learning rounds (explore.smi) shares no molecule with any of the
# three, so a round never labels a training or held-out molecule; and the
# generator reproduces the files from its default seed.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
T="$TAP_TMP"
S=tools/molecules/small.smi
L=tools/molecules/large.smi
B=tools/molecules/basis.smi
X=tools/molecules/explore.smi

for f in $S $L $B $X; do
  check "$(basename $f): every SMILES reads" "$NADIR" convert $f "$T/$(basename $f .smi).sdf"
  "$NADIR" inspect $f --json > "$T/$(basename $f).json" 2>"$T/inspect.err"
done
if /usr/bin/python3 - "$T" $S $L $B $X <<'EOF'
import json, re, sys
tmp, small, large, basis, explore = sys.argv[1:6]
for path, lo, hi, least in ((small, 3, 14, 2000), (large, 20, 40, 50), (basis, 1, 4, 25), (explore, 6, 24, 300)):
    lines = [l.split() for l in open(path)]
    assert len(lines) >= least, (path, len(lines))
    assert all(len(l) == 2 for l in lines), path
    assert len({l[0] for l in lines}) == len(lines), "repeated SMILES in " + path
    assert len({l[1] for l in lines}) == len(lines), "repeated names in " + path
    recs = json.load(open("%s/%s.json" % (tmp, path.split("/")[-1])))["records"]
    assert len(recs) == len(lines), (path, len(recs))
    for r, l in zip(recs, lines):
        el = dict((e, int(n or 1)) for e, n in re.findall(r"([A-Z][a-z]?)(\d*)", r["formula"]))
        assert set(el) <= {"C", "H", "N", "O", "F", "S", "Cl"}, (l, r["formula"])
        heavy = sum(n for e, n in el.items() if e != "H")
        assert lo <= heavy <= hi, (l, heavy)
        assert r["total_charge"] == 0, l
EOF
then ok "sizes, elements, charges and distinctness"; else not_ok "sizes, elements, charges and distinctness"; fi
if /usr/bin/python3 - $S $L $B >"$T/overlap.out" 2>&1 <<'EOF'
import importlib.util, sys
spec = importlib.util.spec_from_file_location("gen", "tools/make-molecules.py")
gen = importlib.util.module_from_spec(spec)
spec.loader.exec_module(gen)
graph = lambda smi: gen.wl_hash(gen.parse_smiles(smi))
seen = {graph(l.split()[0]): l.split()[1] for path in sys.argv[1:3] for l in open(path)}
both = [(l.split()[1], seen[graph(l.split()[0])]) for l in open(sys.argv[3]) if graph(l.split()[0]) in seen]
assert not both, "basis molecules also in the generated lists: %s" % both
EOF
then ok "basis.smi shares no molecule with small.smi and large.smi"; else
  not_ok "basis.smi shares no molecule with small.smi and large.smi" "$(tail -2 "$T/overlap.out")"; fi
# Graphs with their ring kinds perceived (graph_from_smiles), so that two
# Kekule forms of one aromatic molecule are one molecule.
if /usr/bin/python3 - $S $L $B $X >"$T/explore.out" 2>&1 <<'EOF'
import importlib.util, sys
spec = importlib.util.spec_from_file_location("gen", "tools/make-molecules.py")
gen = importlib.util.module_from_spec(spec)
spec.loader.exec_module(gen)
graph = lambda smi: gen.wl_hash(gen.graph_from_smiles(smi))
taken = {graph(l.split()[0]): l.split()[1] for path in sys.argv[1:4] for l in open(path)}
lines = [l.split() for l in open(sys.argv[4])]
both = [(name, taken[graph(smi)]) for smi, name in lines if graph(smi) in taken]
assert not both, "explore.smi molecules also in small, large or basis: %s" % both[:5]
assert len({graph(smi) for smi, _ in lines}) == len(lines), "a molecule twice in explore.smi"
assert all(name == "explore-%05d" % (k + 1) for k, (_, name) in enumerate(lines)), "names not explore-NNNNN in order"
heavy = [gen.graph_from_smiles(smi).n() for smi, _ in lines]
inside = sum(1 for h in heavy if h <= 14)
assert 0.4 <= inside / len(heavy) <= 0.6, "sizes not mixed: %d of %d up to 14 heavy atoms" % (inside, len(heavy))
EOF
then ok "explore.smi: distinct molecules of mixed sizes, none in small, large or basis"; else
  not_ok "explore.smi: distinct molecules of mixed sizes, none in small, large or basis" "$(tail -2 "$T/explore.out")"; fi
/usr/bin/python3 tools/make-molecules.py --out "$T/regen" 2>/dev/null
cmp -s $S "$T/regen/small.smi" && cmp -s $L "$T/regen/large.smi" && cmp -s $X "$T/regen/explore.smi" \
  && ok "the generator reproduces the committed lists" || not_ok "the generator reproduces the committed lists"
finish

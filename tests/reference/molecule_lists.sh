#!/bin/bash
# The committed molecule lists (tools/molecules/*.smi) against the program's
# own SMILES reader, which is independent of the generator's: every line
# reads, formulas hold only H C N O F S Cl, molecules are neutral, sizes are
# in range, names and SMILES are distinct; and the generator reproduces the
# files from its default seed.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
T="$TAP_TMP"
S=tools/molecules/small.smi
L=tools/molecules/large.smi

for f in $S $L; do
  check "$(basename $f): every SMILES reads" "$NADIR" convert $f "$T/$(basename $f .smi).sdf"
  "$NADIR" inspect $f --json > "$T/$(basename $f).json" 2>"$T/inspect.err"
done
if /usr/bin/python3 - "$T" $S $L <<'EOF'
import json, re, sys
tmp, small, large = sys.argv[1:4]
for path, lo, hi, least in ((small, 3, 14, 2000), (large, 20, 40, 50)):
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
/usr/bin/python3 tools/make-molecules.py --out "$T/regen" 2>/dev/null
cmp -s $S "$T/regen/small.smi" && cmp -s $L "$T/regen/large.smi" \
  && ok "the generator reproduces the committed lists" || not_ok "the generator reproduces the committed lists"
finish

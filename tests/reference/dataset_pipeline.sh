#!/bin/bash
# The training-set pipeline (tools/make-dataset.sh) end to end on three tiny
# molecules with the reference method (GFN2-xTB through
# tools/xtb-single-point): every stage runs, the split is by molecule, the
# datasets parse with forces for every atom, a second run labels nothing new
# (resume), and the summary and the compact held-out set are written.
# Skipped when xtb is absent. In tests/reference/ because it runs the
# reference method: once per test run, not once per build.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
if ! command -v xtb >/dev/null 2>&1; then
  echo "ok 1 - the dataset pipeline runs end to end # SKIP xtb is not installed (apt-get install xtb)"
  echo "1..1"
  exit 0
fi
T="$TAP_TMP"
printf 'CCCC butane\nNC(=O)C acetamide\nOCCF fluoroethanol\n' >"$T/small.smi"
printf 'CCOC(=O)CCCN ethyl-aminobutanoate\n' >"$T/large.smi"  # not labelled: --sets train,test keeps the test short
run() {
  NADIR="$NADIR" tools/make-dataset.sh --work "$T/w" --small "$T/small.smi" --large "$T/large.smi" \
    --test-fraction 0.34 --threads 2 --conformers 2 --torsions 1 --thermal-conformer 1 --thermal-torsion 1 \
    --relax 1 --relax-test 1 --every 3 --thermal-minimum 1 --scan-fraction 1 --scan-step 180 --audit 1 --audit-stages conformers \
    --sets train,test "$@"
}
check "the pipeline runs on three molecules" run
cp "$T/err" "$T/run1.err"
W="$T/w"
check "train and test sets written" test -s "$W/train.jsonl" -a -s "$W/test.jsonl"
if /usr/bin/python3 - "$W" >"$T/py.out" 2>&1 <<'EOF'
import json, sys
w = sys.argv[1]
rows = {}
for s in ("train", "test"):
    rows[s] = [json.loads(l) for l in open("%s/%s.jsonl" % (w, s)) if '"elements"' in l]
keys = {s: {r["key"] for r in v} for s, v in rows.items()}
assert len(keys["train"]) == 2 and len(keys["test"]) == 1, keys
assert not (keys["train"] & keys["test"]), "a molecule in both train and test"
tags = {r["tag"] for r in rows["train"]}
need = {"conformer", "torsion varied", "thermal", "relaxation path", "minimum", "thermal near minimum",
        "torsion scan", "rotor turned"}
assert need <= tags, "stages missing: %s" % (need - tags)
for s, v in rows.items():
    for r in v:
        assert len(r["forces"]) == len(r["coordinates"]) == 3 * len(r["elements"])
ids = [r["id"] for v in rows.values() for r in v]
assert len(ids) == len(set(ids)), "a structure labelled twice"
json.load(open(w + "/summary.json"))
print("ok: %d train, %d test structures" % (len(rows["train"]), len(rows["test"])))
EOF
then ok "split by molecule, every stage present, no duplicates"; else
  not_ok "split by molecule, every stage present, no duplicates" "$(tail -3 "$T/py.out")"; fi
grep -q "audit: .*: ok" "$W/logs/label.train.log" && ok "labels were audited" || not_ok "labels were audited"
before=$(cat "$W"/*.jsonl | wc -l)
check "a second run succeeds" run
after=$(cat "$W"/*.jsonl | wc -l)
[ "$before" = "$after" ] && ok "a second run labels nothing new" || not_ok "a second run labels nothing new" "$before -> $after lines"
check "compact held-out set written" test -s "$W/compact/test.jsonl.gz"

# A new machine: only the store survives. A counting reference command shows
# that nothing is labelled or relaxed again.
check "the labels are packed into a store" tools/dataset/store.py save "$W" "$T/store"
printf '#!/bin/sh\necho call >>"%s"\nexec "%s" "$@"\n' "$T/calls" "$PWD/tools/xtb-single-point" >"$T/counting"
chmod +x "$T/counting"
export ND_REFERENCE="$T/counting"
check "a run in a fresh work directory continues from the store" run --work "$T/w2" --store "$T/store"
unset ND_REFERENCE
[ ! -e "$T/calls" ] && ok "the continued run makes no reference call" \
  || not_ok "the continued run makes no reference call" "$(wc -l <"$T/calls") calls"
if /usr/bin/python3 - "$W" "$T/w2" >"$T/py2.out" 2>&1 <<'EOF'
import json, sys
def rows(w, s):
    return {r["id"]: r for r in (json.loads(l) for l in open("%s/%s.jsonl" % (w, s)) if '"elements"' in l)}
for s in ("train", "test"):
    a, b = rows(sys.argv[1], s), rows(sys.argv[2], s)
    assert a.keys() == b.keys(), "%s: %d vs %d structures" % (s, len(a), len(b))
    for i in a:
        x, y = a[i], b[i]
        assert x["energy"] == y["energy"] and x["key"] == y["key"] and x["tag"] == y["tag"]
        assert x["elements"] == y["elements"]
        assert max(abs(p - q) for p, q in zip(x["coordinates"], y["coordinates"])) <= 0.5e-5 + 1e-12
        assert max(abs(p - q) for p, q in zip(x["forces"], y["forces"])) <= 0.5e-3 + 1e-12
print("ok")
EOF
then ok "the continued run holds the same labels (coordinates to 1e-5 A, forces to 1e-3)"; else
  not_ok "the continued run holds the same labels (coordinates to 1e-5 A, forces to 1e-3)" "$(tail -3 "$T/py2.out")"; fi
P=$(ls "$T"/store/train/*.ndpack | head -1)
head -c 200 "$P" >"$T/store/train/9999.ndpack"
check_fails "a truncated pack is refused, naming it" 1 "9999.ndpack" tools/dataset/store.py check "$T/store"
finish

#!/bin/bash
# The active-learning round (tools/active-learning.sh) end to end on the three
# smallest molecules of the exploration list, with tiny budgets, the bundled
# model and the reference method (GFN2-xTB through tools/xtb-single-point):
# structures are visited and scored, the picks are ordered by spread and
# capped per molecule, the labels have forces for every atom, no molecule of
# the training, held-out or basis lists is used (and a list holding one is
# refused), and a second run does nothing new (resume). Skipped when xtb is
# absent. In tests/reference/ because it runs the reference method.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
if ! command -v xtb >/dev/null 2>&1; then
  echo "ok 1 - the active-learning round runs end to end # SKIP xtb is not installed (apt-get install xtb)"
  echo "1..1"
  exit 0
fi
T="$TAP_TMP"
X=tools/molecules/explore.smi
W="$T/w"
CAP=2
/usr/bin/python3 - "$X" >"$T/tiny.smi" <<'EOF'
import importlib.util, sys
spec = importlib.util.spec_from_file_location("gen", "tools/make-molecules.py")
gen = importlib.util.module_from_spec(spec)
spec.loader.exec_module(gen)
lines = [l.split() for l in open(sys.argv[1])]
for smi, name in sorted(lines, key=lambda l: gen.graph_from_smiles(l[0]).n())[:3]:
    print(smi, name)
EOF
# --min-spread 0.5: low, so that a better bundled model still has picks
run() {
  NADIR="$NADIR" tools/active-learning.sh --molecules "$T/tiny.smi" --work "$W" --tries 16 --quiet-rounds 1 \
    --embeddings 2 --per-molecule $CAP --min-spread 0.5 --audit 1 --threads 2 "$@"
}
check "a round runs on three molecules" run
cp "$T/out" "$T/run1.out"
check "labels, picks and the model's errors written" test -s "$W/active.jsonl" -a -s "$W/picked.tsv" -a -s "$W/before.json"
if /usr/bin/python3 - "$W" "$T/tiny.smi" $CAP >"$T/py.out" 2>&1 <<'EOF'
import glob, json, sys
w, tiny, cap = sys.argv[1], sys.argv[2], int(sys.argv[3])
names = {l.split()[1] for l in open(tiny)}
s = json.load(open(w + "/summary.json"))
assert s["molecules"] == 3 and s["visited"] > 0, s
assert s["visited_by_source"].get("conformers", 0) > 0 and s["visited_by_source"].get("paths", 0) > 0, s
scores = {}
for t in glob.glob(w + "/chunks/*.scores.tsv"):
    for line in list(open(t))[1:]:
        p = line.split("\t")
        scores.setdefault(p[1], []).append(float(p[6]))
assert sum(map(len, scores.values())) == s["visited"], "every visited structure scored"
picks = [l.rstrip("\n").split("\t") for l in list(open(w + "/picked.tsv"))[1:]]
assert picks and len(picks) == s["pick"]["picked"], (len(picks), s["pick"])
spread = [float(p[4]) for p in picks]
assert spread == sorted(spread, reverse=True), "picks not ordered by spread"
assert min(spread) >= 0.5, "a pick below the minimum spread"
per = {}
for p in picks:
    per[p[1]] = per.get(p[1], 0) + 1
assert max(per.values()) <= cap, per
assert cap in per.values(), "no molecule reached the cap: %s" % per
for k in per:  # each molecule's most disputed structure is its first pick
    assert abs(max(scores[k]) - max(float(p[4]) for p in picks if p[1] == k)) < 1e-3, k
rows = [json.loads(l) for l in open(w + "/active.jsonl") if '"elements"' in l]
assert len(rows) == len(picks) == s["labelled"], (len(rows), len(picks))
for r in rows:
    assert r["key"] in names, "label of a molecule not in the list: " + r["key"]
    assert len(r["forces"]) == len(r["coordinates"]) == 3 * len(r["elements"]), r["key"]
    assert r["tag"] == "active learning round 1", r["tag"]
ev = json.load(open(w + "/before.json"))
assert ev["structures"] == len(rows) and ev["force"]["mae"] > 0, ev
print("ok: %d visited, %d picked, %s" % (s["visited"], len(picks), per))
EOF
then ok "visited structures scored; picks ordered by spread, capped per molecule; labels with forces"; else
  not_ok "visited structures scored; picks ordered by spread, capped per molecule; labels with forces" "$(tail -3 "$T/py.out")"; fi
# The molecules used, as graphs (ring kinds perceived, so Kekule forms do not
# matter), against every list the model trains or is tested on.
if /usr/bin/python3 - "$W/active.jsonl" "$T/tiny.smi" >"$T/py2.out" 2>&1 <<'EOF'
import importlib.util, json, sys
spec = importlib.util.spec_from_file_location("gen", "tools/make-molecules.py")
gen = importlib.util.module_from_spec(spec)
spec.loader.exec_module(gen)
graph = lambda smi: gen.wl_hash(gen.graph_from_smiles(smi))
smiles = {l.split()[1]: l.split()[0] for l in open(sys.argv[2])}
taken = {graph(l.split()[0]): l.split()[1] for f in ("small", "large", "basis") for l in open("tools/molecules/%s.smi" % f)}
used = {json.loads(l)["key"] for l in open(sys.argv[1]) if '"elements"' in l}
bad = [(k, taken[graph(smiles[k])]) for k in used if graph(smiles[k]) in taken]
assert not bad, bad
EOF
then ok "no molecule of the training, held-out or basis lists labelled"; else
  not_ok "no molecule of the training, held-out or basis lists labelled" "$(tail -2 "$T/py2.out")"; fi
grep -q "audit: .*: ok" "$W/logs/label.log" && ok "a pick was audited" || not_ok "a pick was audited"

# Resume: a counting reference command shows that nothing is labelled again,
# and the files of the earlier stages are left as they were.
printf '#!/bin/sh\necho call >>"%s"\nexec "%s" "$@"\n' "$T/calls" "$PWD/tools/xtb-single-point" >"$T/counting"
chmod +x "$T/counting"
touch "$T/mark"
sleep 1
ND_REFERENCE="$T/counting" check "a second run succeeds" run
[ ! -e "$T/calls" ] && ok "the second run makes no reference call" \
  || not_ok "the second run makes no reference call" "$(wc -l <"$T/calls") calls"
newer=$(find "$W/chunks" "$W/picked.xyz" "$W/active.jsonl" "$W/before.json" -newer "$T/mark" -type f)
[ -z "$newer" ] && ok "the second run redoes no stage" || not_ok "the second run redoes no stage" "$newer"
grep -v '^active-learning \[' "$T/run1.out" | grep -v 'done in' >"$T/s1"
grep -v '^active-learning \[' "$T/out" | grep -v 'done in' >"$T/s2"
cmp -s "$T/s1" "$T/s2" && ok "the second run prints the same summary" || not_ok "the second run prints the same summary"
# An interrupted labelling (last label lost): only that pick is labelled again.
head -n -1 "$W/active.jsonl" >"$T/cut" && cp "$T/cut" "$W/active.jsonl"
rm -f "$W/label.done" "$W/before.json"
ND_REFERENCE="$T/counting" check "a run after an interrupted labelling succeeds" run --audit 0
[ "$(grep -c '"elements"' "$W/active.jsonl")" = "$(($(grep -c . "$W/picked.tsv") - 1))" ] && [ -s "$T/calls" ] \
  && ok "it labels the missing pick only" || not_ok "it labels the missing pick only" "$(wc -l <"$T/calls" 2>/dev/null) calls"

printf '%s\n' "$(head -1 tools/molecules/small.smi)" "$(head -1 "$T/tiny.smi")" >"$T/leak.smi"
check_fails "a list with a training molecule is refused, naming it" 1 "is also small-00001" \
  env NADIR="$NADIR" tools/active-learning.sh --molecules "$T/leak.smi" --work "$T/w3"
"$NADIR" energy --make-random-model "$T/other.model" >/dev/null 2>&1
check_fails "another model in the same work directory is refused" 2 "explored with another model" \
  run --model "$T/other.model"
finish

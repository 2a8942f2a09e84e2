#!/bin/bash
# nadir train and nadir evaluate on a small generated dataset: a run, the
# per-epoch lines, resume equal to an uninterrupted run (same model bytes),
# evaluate's text and JSON, and rejected inputs with their line numbers.
cd "$(dirname "$0")/../.."
. tests/lib/tap.sh
T="$TAP_TMP"

# A dataset of 8 small H/C/O molecules, 6 structures each: random bonded
# chains with pair Morse energies (an invented analytic potential; forces
# are its exact negative gradient, computed here with numpy).
/usr/bin/python3 - "$T/data.jsonl" <<'PY'
import json, sys
import numpy as np
rng = np.random.default_rng(7)
out = open(sys.argv[1], "w")
out.write(json.dumps({"dataset": "nadir", "version": 1, "energy_unit": "kcal/mol", "length_unit": "angstrom"}) + "\n")
def energy(el, x):
    e, g = 0.0, np.zeros_like(x)
    for i in range(len(el)):
        for j in range(i + 1, len(el)):
            d = x[j] - x[i]; r = np.linalg.norm(d)
            re = 1.1 if "H" in (el[i], el[j]) else 1.45
            t = np.exp(-1.8 * (r - re)); e += 60 * (1 - t) ** 2
            de = 60 * 2 * (1 - t) * 1.8 * t
            g[j] += de * d / r; g[i] -= de * d / r
    return e, -g
for m in range(8):
    heavy = ["C", "O", "C"][: 1 + m % 3]
    el = heavy + ["H"] * (2 + m % 3)
    base = np.cumsum(rng.normal(0, 1, (len(el), 3)) * 0.6 + [1.2, 0, 0], axis=0)
    for c in range(6):
        x = base + rng.normal(0, 0.05, base.shape)
        e, f = energy(el, x)
        out.write(json.dumps({"key": "mol-%d" % m, "elements": el, "coordinates": x.ravel().tolist(),
                              "energy": e - 300 * len(el), "forces": f.ravel().tolist()}) + "\n")
PY
[ -s "$T/data.jsonl" ] && ok "generated the dataset" || not_ok "generated the dataset"

OPTS="--layers 8,6 --members 2 --batch 8 --validation-fraction 0.25 --seed 5 --threads 2"
check "a training run of 3 epochs" "$NADIR" train "$T/data.jsonl" -o "$T/a.model" $OPTS --epochs 3
[ "$(grep -c '^epoch ' "$TAP_TMP/err")" -eq 3 ] && ok "one progress line per epoch" \
  || not_ok "one progress line per epoch" "$(head -c 300 "$TAP_TMP/err")"
grep -q 'train E .* F .* valid E .* F .* rel .* lr .* elapsed .* left' "$TAP_TMP/err" \
  && ok "the progress line has errors, rate and times" || not_ok "the progress line has errors, rate and times"
[ -s "$T/a.model" ] && [ -s "$T/a.model.state" ] && ok "model and checkpoint written" || not_ok "model and checkpoint written"

# The provenance, read back from the model file's JSON header (model.h).
if /usr/bin/python3 - "$T/a.model" <<'PY'
import json, sys
raw = open(sys.argv[1], "rb").read().decode("latin-1")
hdr, _ = json.JSONDecoder().raw_decode(raw[raw.index("\n") + 1:])
p = hdr["provenance"]
assert p["dataset"] == "data.jsonl", p
assert p["dataset_structures"] == 48 and p["dataset_molecules"] == 8, p
assert p["split"]["validation_molecules"] == 2 and p["split"]["training_molecules"] == 6, p
assert p["training"]["epochs"] == 3, p
assert p["units"]["energy"] == "kcal/mol", p
assert p["validation"]["force_mae"] > 0, p
assert p["training_sizes"]["heavy_atoms_max"] <= 3 and p["training_sizes"]["atoms_max"] <= 7, p["training_sizes"]
PY
then ok "provenance: dataset, size, largest molecule, split, epochs, units, validation errors"; else
  not_ok "provenance: dataset, size, largest molecule, split, epochs, units, validation errors"; fi
# A molecule bigger than any trained on gets a note and a flag; a small one neither.
"$NADIR" build 'CCCCCO pentanol' -o "$T/big.xyz" 2>/dev/null
"$NADIR" build 'CO methanol' -o "$T/small.xyz" 2>/dev/null
check "energy of a molecule bigger than the training ones" "$NADIR" energy "$T/big.xyz" --model "$T/a.model" --json
grep -q "has 6 heavy atoms; the model was trained on molecules of at most" "$TAP_TMP/err" \
  && grep -q '"outside_training_sizes":[[:space:]]*true' "$TAP_TMP/out" \
  && ok "outside the size domain: noted and flagged" || not_ok "outside the size domain: noted and flagged" "$(head -c 300 "$TAP_TMP/err")"
check "energy of a small molecule" "$NADIR" energy "$T/small.xyz" --model "$T/a.model" --json
! grep -q "size domain" "$TAP_TMP/err" && grep -q '"outside_training_sizes":[[:space:]]*false' "$TAP_TMP/out" \
  && ok "inside the size domain: no note" || not_ok "inside the size domain: no note" "$(head -c 300 "$TAP_TMP/err")"

# Resume: 2 epochs, then --resume to 3, gives the same bytes as 3 in one go.
check "2 epochs" "$NADIR" train "$T/data.jsonl" -o "$T/b.model" $OPTS --epochs 2
check "resume to 3 epochs" "$NADIR" train "$T/data.jsonl" -o "$T/b.model" $OPTS --epochs 3 --resume
grep -q 'resuming after epoch 2' "$TAP_TMP/err" && ok "resume says where it starts" || not_ok "resume says where it starts"
cmp -s "$T/a.model" "$T/b.model" && ok "resumed model equals the uninterrupted one, byte for byte" \
  || not_ok "resumed model equals the uninterrupted one, byte for byte"
# One thread gives the same model.
check "one thread" "$NADIR" train "$T/data.jsonl" -o "$T/c.model" $OPTS --epochs 3 --threads 1
cmp -s "$T/a.model" "$T/c.model" && ok "1 and 2 threads give the same model" || not_ok "1 and 2 threads give the same model"
check_fails "resume with other options is refused" 3 "another dataset or other settings" \
  "$NADIR" train "$T/data.jsonl" -o "$T/b.model" $OPTS --epochs 4 --batch 5 --resume

# Warm start. With a vanishing learning rate the weights cannot move, so the
# refined model predicts what a.model predicts: its weights, offsets and
# scaling were taken over (a random start would be hundreds of kcal/mol off).
# With the normal rate, 3 more epochs from a.model end below a.model's
# training-set force error.
check "warm start, frozen rate" "$NADIR" train "$T/data.jsonl" -o "$T/w0.model" --start-from "$T/a.model" \
  --batch 8 --validation-fraction 0.25 --seed 5 --threads 2 --epochs 1 --learning-rate 1e-12 --learning-rate-floor 1e-12
check "warm start, 3 epochs" "$NADIR" train "$T/data.jsonl" -o "$T/w3.model" --start-from "$T/a.model" \
  --batch 8 --validation-fraction 0.25 --seed 5 --threads 2 --epochs 3
for m in a w0 w3; do "$NADIR" evaluate "$T/$m.model" "$T/data.jsonl" --json > "$T/$m.ev.json" 2>/dev/null; done
if /usr/bin/python3 - "$T" <<'PY'
import json, sys
t = sys.argv[1]
ev = {m: json.load(open("%s/%s.ev.json" % (t, m))) for m in ("a", "w0", "w3")}
raw = open(t + "/w3.model", "rb").read().decode("latin-1")
hdr, _ = json.JSONDecoder().raw_decode(raw[raw.index("\n") + 1:])
assert hdr["provenance"]["training"]["started_from"] == "a.model", hdr["provenance"]["training"]
assert ev["w0"]["members"] == 2
assert abs(ev["w0"]["energy"]["mae"] - ev["a"]["energy"]["mae"]) < 1e-6, (ev["w0"]["energy"], ev["a"]["energy"])
assert ev["w3"]["force"]["mae"] < ev["a"]["force"]["mae"], (ev["w3"]["force"]["mae"], ev["a"]["force"]["mae"])
print("# force MAE: a %.3f, warm start +3 epochs %.3f" % (ev["a"]["force"]["mae"], ev["w3"]["force"]["mae"]))
PY
then ok "warm start keeps the start model's weights and refines them"; else not_ok "warm start keeps the start model's weights and refines them"; fi
check_fails "warm start with --layers is refused" 2 "keeps the start model's" \
  "$NADIR" train "$T/data.jsonl" --start-from "$T/a.model" --layers 4
head -5 "$T/data.jsonl" > "$T/sulfur.jsonl"
echo '{"key": "s", "elements": ["S", "H", "H"], "coordinates": [0,0,0, 0,1.3,0.9, 0,-1.3,0.9], "energy": -2}' >> "$T/sulfur.jsonl"
check_fails "warm start from a model without an element of the data" 3 "sulfur.jsonl, line 6: atom 1 is S" \
  "$NADIR" train "$T/sulfur.jsonl" -o "$T/x.model" --start-from "$T/a.model" --epochs 1
check_fails "warm start from a missing model" 3 "nope.model" "$NADIR" train "$T/data.jsonl" --start-from "$T/nope.model"

# --descriptor: a chosen set of symmetry functions ends up in the model's
# header, and a resume with another descriptor is refused.
cat > "$T/desc.json" <<'JSON'
{"note": "fewer radial, wider angular",
 "descriptor": {"radial_cutoff": 4.8, "radial": [{"eta": 2.5, "shift": 1.0}, {"eta": 2.5, "shift": 2.2}, {"eta": 2.5, "shift": 3.4}],
  "angular_cutoff": 4.1, "angular": [{"eta": 0.03, "zeta": 1, "lambda": 1}, {"eta": 0.03, "zeta": 1, "lambda": -1}, {"eta": 0.7, "zeta": 8, "lambda": 1}]}}
JSON
check "train with --descriptor" "$NADIR" train "$T/data.jsonl" -o "$T/d.model" $OPTS --epochs 2 --descriptor "$T/desc.json"
if /usr/bin/python3 - "$T/d.model" <<'PY'
import json, sys
raw = open(sys.argv[1], "rb").read().decode("latin-1")
d = json.JSONDecoder().raw_decode(raw[raw.index("\n") + 1:])[0]["descriptor"]
assert d["radial_cutoff"] == 4.8 and d["angular_cutoff"] == 4.1, d
assert [r["shift"] for r in d["radial"]] == [1.0, 2.2, 3.4], d["radial"]
assert [(a["eta"], a["zeta"], a["lambda"]) for a in d["angular"]] == [(0.03, 1, 1), (0.03, 1, -1), (0.7, 8, 1)], d["angular"]
assert d["features"] == 3 * 3 + 6 * 3, d["features"]  # 3 elements: 3 radial each, 6 pairs x 3 angular
PY
then ok "--descriptor: the model header holds the chosen functions"; else not_ok "--descriptor: the model header holds the chosen functions"; fi
check "the --descriptor model evaluates" "$NADIR" evaluate "$T/d.model" "$T/data.jsonl"
check "train 2 epochs with the default descriptor" "$NADIR" train "$T/data.jsonl" -o "$T/e.model" $OPTS --epochs 2 \
  --descriptor potential/descriptors/default.json
"$NADIR" train "$T/data.jsonl" -o "$T/f.model" $OPTS --epochs 2 --quiet >/dev/null 2>&1
cmp -s "$T/e.model" "$T/f.model" && ok "potential/descriptors/default.json gives the model trained without --descriptor, byte for byte" \
  || not_ok "potential/descriptors/default.json gives the model trained without --descriptor, byte for byte"
check_fails "resume with another descriptor is refused" 3 "other settings (members, layers, descriptor" \
  "$NADIR" train "$T/data.jsonl" -o "$T/e.model" $OPTS --epochs 3 --resume --descriptor "$T/desc.json"
check_fails "--start-from with a descriptor that is not a widening of the start model's" 3 "cannot widen $T/a.model: the new descriptor's radial cutoff 4.8 differs from the model's 5.2" \
  "$NADIR" train "$T/data.jsonl" --start-from "$T/a.model" --descriptor "$T/desc.json"
# widening: the default functions plus two angular sets; 0 epochs give the
# start model's energies, and the provenance says it was widened
/usr/bin/python3 -c '
import json, sys
d = json.load(open("potential/descriptors/default.json"))
d["angular"] += [{"eta": 0.05, "zeta": 8, "lambda": 1}, {"eta": 0.6, "zeta": 1, "lambda": -1}]
json.dump(d, open(sys.argv[1], "w"))' "$T/wider.json"
check "widen a model by two angular sets (0 epochs)" "$NADIR" train "$T/data.jsonl" -o "$T/wide0.model" --start-from "$T/a.model" \
  --descriptor "$T/wider.json" --epochs 0 --threads 1
"$NADIR" energy "$T/big.xyz" --model "$T/a.model" --gradient --json >"$T/ea.json" 2>/dev/null
"$NADIR" energy "$T/big.xyz" --model "$T/wide0.model" --gradient --json >"$T/ew.json" 2>/dev/null
if /usr/bin/python3 - "$T/ea.json" "$T/ew.json" "$T/wide0.model" <<'PY'
import json, sys
a, w = (json.load(open(f))["records"][0] for f in sys.argv[1:3])
assert abs(a["energy"] - w["energy"]) <= 1e-9 * abs(a["energy"]), (a["energy"], w["energy"])
fa = [c for r in a["forces"] for c in r]; fw = [c for r in w["forces"] for c in r]
assert max(abs(x - y) for x, y in zip(fa, fw)) < 1e-9, "forces differ"
raw = open(sys.argv[3], "rb").read().decode("latin-1")
hdr = json.JSONDecoder().raw_decode(raw[raw.index("\n") + 1:])[0]
assert len(hdr["descriptor"]["angular"]) == 7, hdr["descriptor"]["angular"]
assert hdr["provenance"]["training"]["descriptor_widened_from_features"] == 3 * 10 + 6 * 5, hdr["provenance"]["training"]
PY
then ok "the widened model (0 epochs) gives the start model's energy and forces; provenance says widened from 60 features"
else not_ok "the widened model (0 epochs) gives the start model's energy and forces; provenance says widened from 60 features"; fi
check "widened training runs 2 epochs" "$NADIR" train "$T/data.jsonl" -o "$T/wide2.model" --start-from "$T/a.model" \
  --descriptor "$T/wider.json" --epochs 2 --threads 1
printf '{"radial_cutoff": 5,\n "radial": [{"eta": 1, "shift": 1}],\n "angular_cutoff": 6, "angular": [{"eta": 0.1, "zeta": 2, "lambda": 1}]}\n' > "$T/bad-desc.json"
check_fails "a descriptor with the angular cutoff past the radial one" 3 "bad-desc.json: descriptor: angular cutoff 6 must be positive and at most the radial cutoff 5" \
  "$NADIR" train "$T/data.jsonl" --descriptor "$T/bad-desc.json"
printf '{"radial_cutoff": 5,\n "radial": [\n' > "$T/cut-desc.json"
check_fails "a truncated descriptor file names its line" 3 "cut-desc.json: line 2: not valid JSON" \
  "$NADIR" train "$T/data.jsonl" --descriptor "$T/cut-desc.json"
check_fails "a missing descriptor file" 3 "nope.json: cannot open the descriptor file" \
  "$NADIR" train "$T/data.jsonl" --descriptor "$T/nope.json"

# Evaluate.
check "evaluate" "$NADIR" evaluate "$T/a.model" "$T/data.jsonl"
grep -q 'relative energy' "$TAP_TMP/out" && grep -q 'on H' "$TAP_TMP/out" && grep -q 'ensemble spread' "$TAP_TMP/out" \
  && ok "evaluate prints energies, relative energies, forces by element, spread" || not_ok "evaluate text" "$(head -c 400 "$TAP_TMP/out")"
"$NADIR" evaluate "$T/a.model" "$T/data.jsonl" --json > "$T/ev.json" 2>/dev/null
if /usr/bin/python3 - "$T/ev.json" <<'PY'
import json, sys
d = json.load(open(sys.argv[1]))
assert d["structures"] == 48 and d["members"] == 2
assert d["energy"]["mae"] >= 0 and d["force"]["components"] > 0
assert d["rank_correlation"]["molecules"] == 8
assert {e["element"] for e in d["force"]["by_element"]} == {"H", "C", "O"}
assert 0 <= d["spread"]["energy"]["within_two_spreads"] <= 1
PY
then ok "evaluate --json"; else not_ok "evaluate --json"; fi

# Rejected inputs.
head -5 "$T/data.jsonl" > "$T/bad1.jsonl"
echo '{"key": "s", "elements": ["S", "H", "H"], "coordinates": [0,0,0, 0,1.3,0.9, 0,-1.3,0.9], "energy": -2}' >> "$T/bad1.jsonl"
check_fails "an element outside --elements names its line" 3 "bad1.jsonl, line 6: atom 1 is S" \
  "$NADIR" train "$T/bad1.jsonl" -o "$T/x.model" --elements H,C,O --epochs 1
head -3 "$T/data.jsonl" > "$T/bad2.jsonl"
echo '{"key": "w", "elements": ["O", "H", "H"], "coordinates": [0,0,0, 0,1,0, 0,0,NaN], "energy": -2}' >> "$T/bad2.jsonl"
check_fails "a NaN names its line" 3 "line 4" "$NADIR" train "$T/bad2.jsonl" -o "$T/x.model" --epochs 1
head -2 "$T/data.jsonl" > "$T/bad3.jsonl"
echo '{"key": "w", "elements": ["O", "H", "H"], "coordinates": [0,0,0, 0,1,0], "energy": -2}' >> "$T/bad3.jsonl"
check_fails "a wrong atom count names its line" 3 "line 3" "$NADIR" train "$T/bad3.jsonl" -o "$T/x.model" --epochs 1
check_fails "bad --layers" 2 "--layers" "$NADIR" train "$T/data.jsonl" --layers 8,x
check_fails "bad --elements" 2 "not an element" "$NADIR" train "$T/data.jsonl" --elements H,Qq
check_fails "no dataset" 2 "no dataset" "$NADIR" train
check "train --help" "$NADIR" train --help
check "evaluate --help" "$NADIR" evaluate --help
check_fails "evaluate a missing model" 3 "nope.model" "$NADIR" evaluate "$T/nope.model" "$T/data.jsonl"
# a split that would mislead is said: two molecules, each with an element of its own
printf '3\nwat\nO 0 0 0\nH 0.96 0 0.01\nH -0.24 0.93 0.02\n3\nwat\nO 0 0 0.01\nH 0.99 0 0\nH -0.25 0.9 0\n2\nnn\nN 0 0 0\nH 1.02 0.01 0\n2\nnn\nN 0 0 0\nH 1.05 0 0.01\n' > "$T/two.xyz"
"$NADIR" label "$T/two.xyz" -o "$T/two.jsonl" --potential-command tests/cli/morse_potential.py --threads 1 2>/dev/null
check "train on two molecules" "$NADIR" train "$T/two.jsonl" -o "$T/two.model" --layers 4 --members 1 --epochs 1 --threads 1 --quiet
grep -q "held out for validation, more than the --validation-fraction" "$T/err" && ok "oversized validation share warned" || not_ok "no warning on the split" "$(cat "$T/err")"
grep -qE "element (N|O) is only in validation molecules" "$T/err" && ok "validation-only element warned" || not_ok "no warning on the element" "$(cat "$T/err")"
# --always-train: both molecules train (none held out), and an unknown key is named
printf '# the two\nwat\n  nn \nwat\nnot-there\n' > "$T/keys.txt"
check "train with --always-train" "$NADIR" train "$T/two.jsonl" -o "$T/two.model" --layers 4 --members 1 --epochs 1 --threads 1 --always-train "$T/keys.txt"
grep -q "validation 0 (0 molecules)" "$T/err" && ok "--always-train kept both molecules out of validation" || not_ok "--always-train split" "$(cat "$T/err")"
grep -q "2 of the 3 keys of .*keys.txt are in the dataset" "$T/err" && ok "--always-train counted its keys (a repeated key once)" || not_ok "--always-train count" "$(cat "$T/err")"
grep -q "warning: 1 key of .*keys.txt is not in the dataset" "$T/err" && ok "--always-train warned of the unknown key" || not_ok "--always-train unknown key" "$(cat "$T/err")"
check_fails "--always-train with a missing file" 3 "nope.txt: cannot open it" "$NADIR" train "$T/two.jsonl" --always-train "$T/nope.txt"
printf 'wat\0nn\n' > "$T/binary-keys.txt"
check_fails "--always-train with a binary file names its line" 3 "binary-keys.txt, line 1" "$NADIR" train "$T/two.jsonl" --always-train "$T/binary-keys.txt"
head -1 "$T/two.jsonl" > "$T/header-only.jsonl"
check_fails "evaluate on a dataset without structures" 3 "has no structures" "$NADIR" evaluate "$T/two.model" "$T/header-only.jsonl"
finish

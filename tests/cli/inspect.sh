#!/bin/bash
# nadir inspect, end to end on the sample files of tests/data.
# Molar masses: IUPAC 2021 standard atomic weights (C 12.011, H 1.008,
# N 14.007, O 15.999), summed by hand: glycine C2H5NO2 = 75.067 g/mol,
# methanol CH4O = 32.042 g/mol; AME2020 13C = 13.00335483507 Da.
cd "$(dirname "$0")/../.." || exit 1
. tests/lib/tap.sh
D=tests/data

check "--help exits 0" "$NADIR" inspect --help
grep -q "^examples:" "$TAP_TMP/out" && ok "--help shows examples on stdout" || not_ok "--help shows examples"
check_fails "no input: usage error" 2 "no input file given" "$NADIR" inspect
check_fails "unknown option: usage error" 2 "unknown option '--colour'" "$NADIR" inspect --colour $D/water.xyz
check_fails "unknown format: usage error" 2 "unknown format 'pdb'" "$NADIR" inspect --format pdb $D/water.xyz
check_fails "--format without value" 2 "needs a value" "$NADIR" inspect $D/water.xyz --format
check_fails "two inputs: usage error" 2 "one input file expected" "$NADIR" inspect $D/water.xyz $D/frames.xyz
check_fails "missing file: input error" 3 "cannot open $D/nope.sdf" "$NADIR" inspect $D/nope.sdf

check "survey.sdf reads" "$NADIR" inspect $D/survey.sdf
out="$TAP_TMP/out"; cp "$out" "$TAP_TMP/survey.txt"
[ "$(wc -l <"$out")" -eq 7 ] && ok "survey.sdf: header and 6 rows" || not_ok "survey.sdf rows" "$(cat "$out")"
head -1 "$out" | grep -qE '^record +title +formula +atoms +mass g/mol +charge +bonds +data$' \
  && ok "table header" || not_ok "table header" "$(head -1 "$out")"
grep -qE '^ +3  fen-003 glycine \(zwitterion\)  C2H5NO2 +10 +75\.0670 +0 +9 +3$' "$out" \
  && ok "glycine row: formula, atoms, 75.0670 g/mol, charge, bonds, data" || not_ok "glycine row" "$(cat "$out")"
grep -qE '^ +1  fen-001 methanol .* CH4O +6 +32\.0420 +0 +5 +3$' "$out" && ok "methanol row" || not_ok "methanol row"
# columns line up: every row has "mass" ending at the same column
awk '{ print index($0, ".") }' "$out" | tail -n +2 | sort -u | wc -l | grep -qx 1 \
  && ok "mass column aligned" || not_ok "mass column aligned" "$(cat "$out")"

check "frames.xyz reads" "$NADIR" inspect $D/frames.xyz
grep -qE '^ +2  fen-002 acetic acid, lower-case symbols +C2H4O2 +8 +60\.0520 +0 +- +0$' "$TAP_TMP/out" \
  && ok "xyz: no bond table shows '-'" || not_ok "xyz row" "$(cat "$TAP_TMP/out")"

check "--json" "$NADIR" inspect --json $D/survey.sdf
if python3 - "$TAP_TMP/out" <<'PY'
import json, sys
d = json.load(open(sys.argv[1]))
r = d["records"]
assert d["format"] == "sdf" and d["read"] == 6 and d["failed"] == 0 and d["failures"] == []
assert [x["record"] for x in r] == [1, 2, 3, 4, 5, 6]
g = r[2]
assert g["formula"] == "C2H5NO2" and g["atoms"] == 10 and g["bonds"] == 9 and g["data_items"] == 3
assert abs(g["molar_mass"] - 75.067) < 1e-9 and g["total_charge"] == 0
h = r[3]  # 13C-labelled CHBrClF
assert abs(h["molar_mass"] - (13.00335483507 + 1.008 + 79.904 + 35.45 + 18.998403162)) < 1e-9
PY
then ok "--json: records, masses, counts"; else not_ok "--json content"; fi

check "V3000 record" "$NADIR" inspect --json $D/glycine_v3000.sdf
python3 -c "import json,sys; d=json.load(open(sys.argv[1])); r=d['records'][0]; assert r['total_charge']==0 and abs(r['molar_mass']-(75.067-12.011+13.00335483507))<1e-9" "$TAP_TMP/out" \
  && ok "V3000: charges and MASS= read" || not_ok "V3000 values"

"$NADIR" inspect - <$D/survey.sdf >"$TAP_TMP/stdin.txt" 2>"$TAP_TMP/err"
[ $? -eq 0 ] && diff -q "$TAP_TMP/stdin.txt" "$TAP_TMP/survey.txt" >/dev/null \
  && ok "'-' reads stdin (format sniffed)" || not_ok "stdin"
check_fails "stdin with a wrong --format" 3 "stdin, frame 1, line 1: expected the atom count" \
  "$NADIR" inspect --format xyz - <$D/survey.sdf

# hydrogens left implicit (a 2D drawing of ethanol, C-C-O only): counted as written, with a note
check "implicit hydrogens: still exit 0" "$NADIR" inspect $D/ethanol_implicit_h.sdf
grep -q "record 1: 3 atoms with open valences (hydrogens left implicit?)" "$TAP_TMP/err" \
  && ok "implicit hydrogens: note on stderr" || not_ok "implicit-H note" "$(cat "$TAP_TMP/err")"
grep -qE ' C2O +3 +40\.0210 ' "$TAP_TMP/out" && ok "formula of the atoms written (C2O, 2(12.011) + 15.999)" || not_ok "C2O row"
"$NADIR" inspect --json $D/ethanol_implicit_h.sdf 2>/dev/null | python3 -c "import json,sys; assert json.load(sys.stdin)['records'][0]['open_valences'] == 3" \
  && ok "--json: open_valences" || not_ok "--json open_valences"
"$NADIR" inspect $D/survey.sdf 2>"$TAP_TMP/err2" >/dev/null
[ ! -s "$TAP_TMP/err2" ] && ok "no note for explicit-H records (zwitterion charges honoured)" || not_ok "false note" "$(cat "$TAP_TMP/err2")"

check_fails "some records bad: exit 5, others listed" 5 "record 2, line 20" "$NADIR" inspect $D/malformed/sdf_one_bad_of_three.sdf
[ "$(wc -l <"$TAP_TMP/out")" -eq 3 ] && ok "the two good records are listed" || not_ok "good records listed"
grep -q "2 records read, 1 failed" "$TAP_TMP/err" && ok "summary of failures on stderr" || not_ok "failure summary"
check_fails "--json with a bad record: exit 5" 5 "record 2" "$NADIR" inspect --json $D/malformed/sdf_one_bad_of_three.sdf
python3 -c "import json,sys; d=json.load(open(sys.argv[1])); assert d['read']==2 and d['failed']==1 and d['failures'][0]['record']==2 and 'line 20' in d['failures'][0]['message']" "$TAP_TMP/out" \
  && ok "--json lists the failure with its record and message" || not_ok "--json failures"
check_fails "nothing readable: exit 3" 3 "line 1: no sdf records" "$NADIR" inspect $D/malformed/empty.sdf
# a record without bonds (from XYZ) is not said to have implicit hydrogens
"$NADIR" convert tests/data/water.xyz "$TAP_TMP/bondless.sdf" 2>/dev/null
check "bondless SD" "$NADIR" inspect "$TAP_TMP/bondless.sdf"
grep -q "no bonds" "$TAP_TMP/err" && ! grep -q "implicit" "$TAP_TMP/err" && ok "bondless record: no-bond note, no implicit-H note" || not_ok "bondless note" "$(cat "$TAP_TMP/err")"
finish

#!/bin/bash
# nadir convert, end to end: round trips through XYZ and SD, data items,
# stdin/stdout, atomic output, --strict.
cd "$(dirname "$0")/../.." || exit 1
. tests/lib/tap.sh
D=tests/data
T="$TAP_TMP"

check "--help exits 0" "$NADIR" convert --help
grep -q "^examples:" "$T/out" && ok "--help shows examples" || not_ok "--help examples"
check_fails "one file only: usage error" 2 "expected an input and an output file" "$NADIR" convert $D/survey.sdf
check_fails "unknown output extension: usage error" 2 "cannot tell the output format of '$T/x.pdb'" "$NADIR" convert $D/survey.sdf "$T/x.pdb"
check_fails "stdout without --to: usage error" 2 "add --to" "$NADIR" convert $D/survey.sdf -
check_fails "bad --from: usage error" 2 "unknown format 'cml'" "$NADIR" convert --from cml $D/survey.sdf "$T/a.xyz"
check_fails "same input and output: usage error" 2 "same file" "$NADIR" convert $D/survey.sdf $D/survey.sdf

# SD -> XYZ -> SD -> XYZ: XYZ holds elements, coordinates and titles; those survive exactly
check "SD to XYZ" "$NADIR" convert $D/survey.sdf "$T/a.xyz"
grep -q "6 records written to $T/a.xyz" "$T/err" && ok "summary on stderr" || not_ok "summary" "$(cat "$T/err")"
check "XYZ to SD" "$NADIR" convert "$T/a.xyz" "$T/b.sdf"
check "SD to XYZ again" "$NADIR" convert "$T/b.sdf" "$T/c.xyz"
cmp -s "$T/a.xyz" "$T/c.xyz" && ok "SD->XYZ->SD->XYZ: XYZ text identical" || not_ok "XYZ round trip differs"
grep -c '^fen-00[1-6] ' "$T/a.xyz" | grep -qx 6 && ok "titles on the XYZ comment lines" || not_ok "titles in XYZ"
# coordinates: the SD file's 4-decimal values, read back from XYZ, are the same numbers
awk 'NF>=10 && $4 ~ /^[A-Z][a-z]?$/ {printf "%s %.4f %.4f %.4f\n", $4, $1, $2, $3}' $D/survey.sdf >"$T/sd.coords"
awk 'NF==4 && $1 ~ /^[A-Z][a-z]?$/ {printf "%s %.4f %.4f %.4f\n", $1, $2, $3, $4}' "$T/a.xyz" >"$T/xyz.coords"
[ -s "$T/sd.coords" ] && cmp -s "$T/sd.coords" "$T/xyz.coords" && ok "coordinates and elements kept" || not_ok "coordinates differ"

# SD -> SD keeps data items, charges, isotopes, bonds
check "SD to SD" "$NADIR" convert $D/survey.sdf "$T/s.sdf"
sed -n '/^M  END/,/^\$\$\$\$/p' $D/survey.sdf | grep -v '^M  END' >"$T/data.in"
sed -n '/^M  END/,/^\$\$\$\$/p' "$T/s.sdf" | grep -v '^M  END' >"$T/data.out"
[ -s "$T/data.in" ] && cmp -s "$T/data.in" "$T/data.out" && ok "data items survive SD->SD (multi-line values too)" || not_ok "data items differ"
"$NADIR" inspect $D/survey.sdf >"$T/i1"; "$NADIR" inspect "$T/s.sdf" >"$T/i2"
cmp -s "$T/i1" "$T/i2" && ok "formula, mass (isotopes), charge, bonds, data count unchanged" || not_ok "inspect differs"
grep -q "^M  CHG  2   1   1   5  -1$" "$T/s.sdf" && ok "zwitterion charges written as M  CHG" || not_ok "M  CHG"
grep -q "^M  ISO  2   2   2   3   2$" "$T/s.sdf" && ok "D2O isotopes written as M  ISO" || not_ok "M  ISO"
check "SD to SD again" "$NADIR" convert "$T/s.sdf" "$T/s2.sdf"
cmp -s "$T/s.sdf" "$T/s2.sdf" && ok "SD output is stable (same text when converted again)" || not_ok "SD not stable"
check "V3000 to V2000" "$NADIR" convert $D/glycine_v3000.sdf "$T/v2.sdf"
"$NADIR" inspect $D/glycine_v3000.sdf >"$T/j1"; "$NADIR" inspect "$T/v2.sdf" >"$T/j2"
cmp -s "$T/j1" "$T/j2" && grep -q "V2000" "$T/v2.sdf" && ok "V3000 charges and masses kept in V2000" || not_ok "V3000 to V2000"

# SD -> SMILES -> SD keeps the graph: formula, mass (isotopes), charges, bond count, titles
check "SD to SMILES" "$NADIR" convert $D/survey.sdf "$T/s.smi"
[ "$(wc -l <"$T/s.smi")" = 6 ] && grep -q '^\[NH3+\]CC(=O)\[O-\] fen-003 glycine (zwitterion)$' "$T/s.smi" \
  && ok "one SMILES per line, title after it" || not_ok "SMILES lines" "$(cat "$T/s.smi")"
# stereo from the 3D coordinates: record 4 is (R)-CHBrClF (CIP priorities Br > Cl > F > H;
# (Br-C).((Cl-C)x(F-C)) = -3.52 A^3 from the file's coordinates, by hand: clockwise with H
# away, so R), which OpenSMILES writes [C@H](Br)(Cl)F (anticlockwise seen from the H);
# record 6 has its methyls trans (dihedral 180 degrees in the file): E, written C(=C\C)/C.
grep -qF '[13C@H](Br)(Cl)F fen-004' "$T/s.smi" && ok "R centre from 3D coordinates written as @" || not_ok "chirality" "$(cat "$T/s.smi")"
grep -qF 'C(=C\C)/C fen-006' "$T/s.smi" && ok "E double bond from 3D coordinates" || not_ok "double bond" "$(cat "$T/s.smi")"
check "SMILES to SD" "$NADIR" convert "$T/s.smi" "$T/t.sdf"
"$NADIR" inspect "$T/t.sdf" | awk '{ NF--; print }' >"$T/k2"; awk '{ NF--; print }' "$T/i1" >"$T/k1"
cmp -s "$T/k1" "$T/k2" && ok "SD->SMILES->SD: formula, mass, charge, bonds kept" || not_ok "SMILES round trip" "$(diff "$T/k1" "$T/k2")"
check_fails "SMILES to XYZ: no coordinates, exit 3" 3 "has no coordinates" "$NADIR" convert "$T/s.smi" "$T/u.xyz"

# stdin and stdout
"$NADIR" convert - - --from sdf --to xyz <$D/survey.sdf >"$T/p.xyz" 2>"$T/err"
[ $? -eq 0 ] && cmp -s "$T/p.xyz" "$T/a.xyz" && ok "'-' in and out" || not_ok "stdin/stdout" "$(cat "$T/err")"
"$NADIR" convert - "$T/q.sdf" <$D/frames.xyz 2>"$T/err"
[ $? -eq 0 ] && [ "$(grep -c '^\$\$\$\$' "$T/q.sdf")" = 4 ] && ok "stdin sniffed as XYZ" || not_ok "stdin sniff"

# atomic output: a failing conversion leaves the old file as it was and no temporary
echo "old content" >"$T/keep.sdf"
check_fails "nothing readable: exit 3" 3 "no sdf records" "$NADIR" convert $D/malformed/empty.sdf "$T/keep.sdf"
[ "$(cat "$T/keep.sdf")" = "old content" ] && ok "existing output untouched" || not_ok "output clobbered"
check_fails "--strict on a bad record: exit 3" 3 "record 2, line 20" "$NADIR" convert --strict $D/malformed/sdf_one_bad_of_three.sdf "$T/keep.sdf"
[ "$(cat "$T/keep.sdf")" = "old content" ] && ok "--strict failure leaves the old output" || not_ok "strict clobbered"
ls -A "$T" | grep -qF '.part-' && not_ok "temporary files left" || ok "no temporary files left"
check_fails "partial: exit 5" 5 "1 failed and left out" "$NADIR" convert $D/malformed/sdf_one_bad_of_three.sdf "$T/part.sdf"
[ "$(grep -c '^\$\$\$\$' "$T/part.sdf")" = 2 ] && ok "the two good records written" || not_ok "partial output"
mkdir -p "$T/ro" && chmod 500 "$T/ro"
if [ "$(id -u)" != 0 ]; then
  check_fails "unwritable directory: exit 3" 3 "cannot create a file beside" "$NADIR" convert $D/water.xyz "$T/ro/w.sdf"
else
  check_fails "missing directory: exit 3" 3 "cannot create a file beside" "$NADIR" convert $D/water.xyz "$T/nodir/w.sdf"
fi

# a record the output format cannot hold is reported, not dropped silently
awk 'BEGIN { print 1000; print "a 1000-atom helium cluster"; for (i = 0; i < 1000; i++) printf "He %d 0 0\n", 3 * i }' >"$T/big.xyz"
check_fails "1000 atoms to SD V2000: exit 3" 3 "holds at most 999" "$NADIR" convert "$T/big.xyz" "$T/big.sdf"
[ ! -e "$T/big.sdf" ] && ok "no output for an unwritable record" || not_ok "big.sdf written"
check "1000 atoms to XYZ" "$NADIR" convert "$T/big.xyz" "$T/big2.xyz"
cmp -s <(awk 'NR>2{print $1, $2+0}' "$T/big.xyz") <(awk 'NR>2{print $1, $2+0}' "$T/big2.xyz") && ok "XYZ to XYZ keeps every atom" || not_ok "XYZ to XYZ"
# what the output format loses is said; a record it refuses is named by its input record
printf 'CCO ethanol\nCC methane-ish\n' > "$T/two.smi"
check_fails "SMILES to XYZ: input record named" 3 "two.smi, record 2: cannot write to" "$NADIR" convert "$T/two.smi" "$T/two.xyz"
check "SMILES to SD" "$NADIR" convert "$T/two.smi" "$T/two.sdf"
grep -q "no coordinates (SMILES)" "$T/err" && ok "SMILES to SD: zero coordinates noted" || not_ok "no note on zero coordinates" "$(cat "$T/err")"
printf 'C[N+](C)(C)C tma\n' | "$NADIR" build - 2>/dev/null > "$T/tma.sdf"
check "charged SD to XYZ" "$NADIR" convert "$T/tma.sdf" "$T/tma.xyz"
grep -q "net charge, unpaired electrons or isotope" "$T/err" && ok "lost charge noted" || not_ok "no note on the lost charge" "$(cat "$T/err")"
check "XYZ to SD" "$NADIR" convert $D/water.xyz "$T/w.sdf"
grep -q "without bonds" "$T/err" && ok "missing bonds noted" || not_ok "no note on missing bonds" "$(cat "$T/err")"
cp $D/water.xyz "$T/same.xyz"
check_fails "same file by another path" 2 "the same file" "$NADIR" convert "$T/same.xyz" "$T/../$(basename "$T")/same.xyz"
check_fails "stdout named in messages" 3 "stdout not written" "$NADIR" convert "$T/two.smi" - --to xyz
finish

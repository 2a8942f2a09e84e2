#!/bin/bash
# The malformed-input corpus (tests/data/malformed/): every file must give a
# clear message on stderr that names the file, the line and what was wrong,
# a documented non-zero exit code (3: nothing readable; 5: some records read,
# some failed), and no crash or sanitizer report. Each file goes through
# `nadir inspect` and `nadir convert` (which must then leave no output file).
cd "$(dirname "$0")/../.." || exit 1
. tests/lib/tap.sh
D=tests/data/malformed

# file | exit code | what the message must say
cases=(
  "xyz_count_not_number.xyz|3|line 1: expected the atom count (a positive integer alone on the line), found 'three'"
  "xyz_too_few_atom_lines.xyz|3|line 4: input ends after 2 of 3 atom lines"
  "xyz_unknown_element.xyz|3|frame 1, line 3: atom 1 of 2: unknown element 'Qx'"
  "xyz_nonnumeric_coordinate.xyz|3|line 4: atom 2 of 2: y coordinate '0.0.1' is not a number"
  "xyz_nan_coordinate.xyz|3|line 4: atom 2 of 2: y coordinate 'NaN' is not finite"
  "xyz_inf_coordinate.xyz|3|line 4: atom 2 of 2: z coordinate 'inf' is not finite"
  "xyz_short_frame_then_good.xyz|5|frame 1, line 5: found a lone number where atom 3 of 3 was expected"
  "xyz_zero_count.xyz|3|line 1: atom count 0; expected 1..1000000"
  "xyz_only_count_line.xyz|3|line 1: input ends after the count line"
  "xyz_missing_coordinate.xyz|3|line 4: atom 2 of 2: found 3 fields; expected an element and x y z"
  "xyz_huge_count.xyz|3|line 1: atom count 99999999; expected 1..1000000"
  "xyz_atom_number_too_big.xyz|3|line 3: atom 1 of 1: unknown element '118'"
  "xyz_content_is_sdf.xyz|3|the name says xyz but line 4 is an SD counts line"
  "empty.xyz|3|line 1: no xyz records in the input (empty file?)"
  "empty.sdf|3|line 1: no sdf records in the input (empty file?)"
  "blank_lines_only.sdf|3|line 4: no sdf records in the input"
  "binary_garbage.sdf|3|line holds a NUL byte (binary data?)"
  "sdf_fewer_atom_lines.sdf|3|record 1, line 8: expected atom line 4 of 5 (the counts line's number), found 'M  END'"
  "sdf_unknown_element.sdf|3|record 1, line 6: atom 2: unknown element symbol 'Zz'"
  "sdf_nonnumeric_coordinate.sdf|3|record 1, line 6: atom 2: x coordinate '1.2x00' is not a number"
  "sdf_nan_coordinate.sdf|3|record 1, line 6: atom 2: y coordinate 'nan' is not finite"
  "sdf_inf_coordinate.sdf|3|record 1, line 6: atom 2: z coordinate 'Infinity' is not finite"
  "sdf_bond_index_out_of_range.sdf|3|record 1, line 7: bond 1 joins atoms 1 and 9; expected atom numbers 1..2"
  "sdf_truncated_record.sdf|3|record 1, line 7: atom 3: line has 10 columns; expected at least 34"
  "sdf_missing_m_end.sdf|3|record 1, line 8: data item before 'M  END'"
  "sdf_missing_m_end_at_separator.sdf|3|record 1, line 8: record ends ('\$\$\$\$') too early; expected 'M  END'"
  "sdf_bad_counts_line.sdf|3|record 1, line 4: expected the counts line"
  "sdf_bad_v3000_block.sdf|3|record 1, line 10: ATOM block ends after 2 atoms; COUNTS says 3"
  "sdf_v3000_no_ctab.sdf|3|record 1, line 5: expected 'M  V30 BEGIN CTAB'"
  "sdf_one_bad_of_three.sdf|5|record 2, line 20: M  CHG line: atom 7 is outside 1..2"
  "sdf_bad_charge_code.sdf|3|record 1, line 6: atom 2: charge code in columns 37-39 must be 0..7"
  "sdf_duplicate_bond.sdf|3|record 1, line 8: bond 2 joins atoms 1 and 2 again"
  "sdf_query_bond.sdf|3|record 1, line 7: bond 1 has type 8"
  "sdf_query_atom.sdf|3|record 1, line 6: atom 2: 'Q' is a query atom"
  "sdf_self_bond.sdf|3|record 1, line 7: bond 1 joins atom 2 to itself"
  "sdf_content_is_xyz.sdf|3|the name says sdf but line 1 holds an XYZ atom count alone"
  "sdf_data_header_without_name.sdf|3|record 1, line 9: data header without a name"
  "sdf_bad_m_chg.sdf|3|record 1, line 8: M  CHG line: expected a count 1..8"
)

# every corpus file has a case, and every case a file
for f in "$D"/*; do
  b=$(basename "$f"); found=0
  for c in "${cases[@]}"; do [ "${c%%|*}" = "$b" ] && found=1; done
  if [ $found = 1 ]; then ok "corpus file $b has an expected message"; else not_ok "corpus file $b has no case"; fi
done
[ "$(ls "$D" | wc -l)" -ge 20 ] && ok "corpus holds at least 20 files" || not_ok "corpus too small"

for c in "${cases[@]}"; do
  IFS='|' read -r file code msg <<<"$c"
  path="$D/$file"
  check_fails "inspect $file: exit $code, says what was wrong" "$code" "$msg" "$NADIR" inspect "$path"
  # the message names the file (and the line, except for the content check,
  # which names the line inside its text)
  if grep -qF "$path" "$TAP_TMP/err" && grep -qE "line [0-9]+" "$TAP_TMP/err"; then
    ok "inspect $file: stderr names the file and the line"
  else
    not_ok "inspect $file: stderr names the file and the line" "$(head -c 300 "$TAP_TMP/err")"
  fi
  out="$TAP_TMP/out-$file.sdf"
  check_fails "convert $file: exit $code" "$code" "$msg" "$NADIR" convert "$path" "$out"
  if [ "$code" = 3 ]; then
    if [ ! -e "$out" ] && [ -z "$(ls -A "$TAP_TMP" | grep -F '.part-')" ]; then
      ok "convert $file: no output file, no temporary left"
    else not_ok "convert $file: left an output behind"; fi
  else
    if [ -s "$out" ]; then ok "convert $file: the good records were written"; else not_ok "convert $file: no output"; fi
    check_fails "convert --strict $file: exit 3" 3 "$msg" "$NADIR" convert --strict "$path" "$out.strict.sdf"
    if [ ! -e "$out.strict.sdf" ]; then ok "convert --strict $file: nothing written"; else not_ok "convert --strict $file: output left"; fi
  fi
done
finish

#!/bin/bash
# nadir build, end to end: one SMILES, a file with a bad line, counts,
# seeds, charges in the SD output, usage and input errors.
cd "$(dirname "$0")/../.." || exit 1
. tests/lib/tap.sh
T="$TAP_TMP"

check "--help exits 0" "$NADIR" build --help
grep -q "^examples:" "$T/out" && ok "--help shows examples" || not_ok "--help examples"
check_fails "no argument: usage error" 2 "expected one SMILES or file" "$NADIR" build
check_fails "--count 0: usage error" 2 "--count needs a whole number" "$NADIR" build CCO --count 0
check_fails "--seed -1: usage error" 2 "--seed needs a whole number" "$NADIR" build CCO --seed -1
check_fails "-o x.smi: usage error" 2 "build writes 3D structures" "$NADIR" build CCO -o "$TAP_TMP/x.smi"
"$NADIR" build CCO -o "$TAP_TMP/ethanol.xyz" 2>/dev/null
check "-o x.xyz writes XYZ that reads back as XYZ" "$NADIR" inspect "$TAP_TMP/ethanol.xyz" --format xyz
[ "$(head -1 "$TAP_TMP/ethanol.xyz")" = 9 ] && ok "-o x.xyz: first line is the atom count" \
  || not_ok "-o x.xyz: first line is the atom count" "$(head -1 "$TAP_TMP/ethanol.xyz")"
check_fails "bad SMILES: input error with its column" 3 "SMILES column 2: ring bond 1 never closed" "$NADIR" build C1CC
check_fails "missing file: input error" 3 "cannot open" "$NADIR" build "$T/none.smi"

# one molecule to stdout: L-alanine has 13 atoms and 12 bonds
check "L-alanine to stdout" "$NADIR" build 'N[C@@H](C)C(=O)O'
grep -q ' 13 12  0  0  0  0  0  0  0  0999 V2000' "$T/out" && ok "counts line: 13 atoms, 12 bonds" || not_ok "counts line" "$(head -5 "$T/out")"
grep -q '^> *<smiles>' "$T/out" && ok "data item smiles" || not_ok "smiles data item"
[ "$(grep -c '^\$\$\$\$' "$T/out")" = 1 ] && ok "one record" || not_ok "record count"

# a file: blank and comment lines skipped, the bad line reported with its
# line number, the others built; --count structures per molecule
printf 'CCO ethanol\n\n# a comment\nC1CC broken\nc1ccccc1 benzene\nF/C=C/F\n' >"$T/in.smi"
check_fails "file with a bad line: exit 5" 5 "in.smi, line 4: SMILES column 2: ring bond 1 never closed" \
  "$NADIR" build "$T/in.smi" -o "$T/a.sdf" --count 2 --seed 5
[ "$(grep -c '^\$\$\$\$' "$T/a.sdf")" = 6 ] && ok "3 molecules x 2 structures written" || not_ok "records in a.sdf"
grep -q "3 molecules built (2 structures each)" "$T/err" && ok "summary on stderr" || not_ok "summary" "$(cat "$T/err")"
grep -q '^benzene$' "$T/a.sdf" && ok "names become titles" || not_ok "titles"

# determinism: same seed, same bytes; another seed, other coordinates
"$NADIR" build "$T/in.smi" -o "$T/b.sdf" --count 2 --seed 5 2>/dev/null
cmp -s "$T/a.sdf" "$T/b.sdf" && ok "same seed: identical output" || not_ok "same seed differs"
"$NADIR" build "$T/in.smi" -o "$T/c.sdf" --count 2 --seed 6 2>/dev/null
cmp -s "$T/a.sdf" "$T/c.sdf" && not_ok "another seed gave identical output" || ok "another seed: other coordinates"

# thread count: the same bytes with one or two BLAS and OpenMP threads
OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 "$NADIR" build "$T/in.smi" -o "$T/t1.sdf" --count 2 2>/dev/null
OPENBLAS_NUM_THREADS=2 OMP_NUM_THREADS=2 "$NADIR" build "$T/in.smi" -o "$T/t2.sdf" --count 2 2>/dev/null
cmp -s "$T/t1.sdf" "$T/t2.sdf" && ok "same output at 1 and 2 threads" || not_ok "thread count changed the output"

# standard input, and charges written as M  CHG
printf 'C[N+](C)(C)C.[Cl-] tetramethylammonium chloride\n' | "$NADIR" build - >"$T/q.sdf" 2>"$T/err"
[ $? = 0 ] && ok "stdin builds" || not_ok "stdin" "$(cat "$T/err")"
grep -q '^M  CHG  2' "$T/q.sdf" && ok "charges in M  CHG" || not_ok "charges" "$(grep 'M  ' "$T/q.sdf")"

# the output reads back: nadir convert to SMILES and inspect agree on the formula
check "SD output reads back" "$NADIR" inspect "$T/a.sdf"
grep -q 'C6H6' "$T/out" && grep -q 'C2H2F2' "$T/out" && ok "formulas kept" || not_ok "formulas" "$(cat "$T/out")"
# inputs that are not SMILES: an SD file, a directory, binary bytes
"$NADIR" build "$T/a.sdf" -o "$T/x.sdf" 2>/dev/null; [ -e "$T/x.sdf" ] && not_ok "SD input left an output" || ok "SD input: no output"
check_fails "an SD file is refused, not read as SMILES lines" 3 "build reads SMILES" "$NADIR" build "$T/a.sdf"
check_fails "a directory is named as such" 3 "is a directory" "$NADIR" build "$T"
printf 'CC\001C x\n' > "$T/ctl.smi"
check_fails "a control byte is shown as hex" 3 "unexpected byte 0x01" "$NADIR" build "$T/ctl.smi"
check "nadir help build" "$NADIR" help build
grep -q "^usage: nadir build" "$T/out" && ok "nadir help COMMAND shows the command's help" || not_ok "help COMMAND" "$(head -2 "$T/out")"
printf '\357\273\277CCO ethanol\n' > "$T/bom.smi"
check "a file with a UTF-8 byte-order mark" "$NADIR" build "$T/bom.smi"
grep -q "^ethanol" "$T/out" && ok "byte-order mark skipped" || not_ok "byte-order mark" "$(cat "$T/err")"
cat "$T/a.sdf" | "$NADIR" build - >"$T/piped.out" 2>"$T/err"; rc=$?
[ $rc = 3 ] && grep -q "looks like an SD file" "$T/err" && [ ! -s "$T/piped.out" ] && ok "SD on stdin refused before anything is written" || not_ok "SD on stdin" "exit $rc: $(head -c 300 "$T/err")"
printf '3\nwater\nO 0 0 0\nH 0.96 0 0\nH -0.24 0.93 0\n' > "$T/w.smi"
check_fails "an XYZ file named .smi is refused" 3 "looks like an XYZ file" "$NADIR" build "$T/w.smi"
finish

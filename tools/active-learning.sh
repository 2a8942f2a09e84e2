#!/bin/bash
# One round of active learning (tracker issue 10): let the model search
# conformers and relax structures of molecules it was never trained or tested
# on, pick the structures where its ensemble members disagree most, and label
# them with the reference method (GFN2-xTB through tools/xtb-single-point).
#
#   tools/active-learning.sh [options]        (--help lists them)
#
# Stages (each writes its own files under the work directory, default
# data/active/roundK, and is skipped on a restart when its output is there;
# molecules go in chunks of 10, each chunk's files finished on their own, so
# killing the run loses at most one chunk's step; labelling resumes structure
# by structure; a larger --count or other pick settings pick again and label
# only the new picks; another model or other search settings in the same work
# directory are refused):
#   molecules  the first N molecules of tools/molecules/explore.smi (generated
#              by tools/make-molecules.py: 6-24 heavy atoms, none in the
#              training, held-out or basis lists); refused if any molecule is
#              in small.smi, large.smi or basis.smi after all
#   search     nadir conformers --window -1 with a modest budget: every
#              distinct minimum the search found, not only the low ones
#   paths      nadir optimize --trajectory from a few distance-geometry
#              embeddings per molecule: every step of each relaxation path
#              (the strained starts included) and its end
#   collect    those structures, less any with a bond of the molecule's graph
#              broken (the reference would label them, but a molecule in
#              pieces is not what conformer work visits); those with atoms
#              closer than bonded that the graph does not bond stay: the
#              pilot relaxes some cyclobutanes to a 1.8 A cross-ring C-C
#              distance, a spurious minimum a round must teach it away
#   score      nadir energy --json --gradient on each: the largest per-atom
#              force spread of the ensemble (the score), and the energy spread
#              per atom (kept for the summary)
#   pick       highest score first, at most --per-molecule per molecule, none
#              below --min-spread, none within --energy-tol kcal/mol (model
#              energy) of one already picked of the same molecule (likely the
#              same point: a path's last steps, a minimum reached twice) nor
#              within --distance-tol (RMS change of the interatomic distances:
#              neighbouring steps of a path), then the --picks highest of all.
#              Defaults, rules of thumb (common practice, no source): at most
#              4 per molecule, so one hard molecule cannot take the round;
#              minimum spread 5 kcal/mol/A, about the 10th percentile of
#              the pilot's held-out structures (4.8; median 9.2); 0.05 kcal/mol, the
#              energy tolerance of nadir conformers; 0.05 A, within the
#              change of one path step (0.001-0.07 A measured in a pilot
#              trial) and far below that between two distinct conformers
#              (0.7-1.2 A)
#   label      nadir label --potential-command tools/xtb-single-point --audit,
#              keys = molecule names, into WORK/active.jsonl
#   evaluate   nadir evaluate MODEL WORK/active.jsonl: the model's errors on
#              the structures it was least sure of ("before" figures)
#   summary    counts and errors, printed and in WORK/summary.json
#
# Why the force spread is the score: measured on the pilot model's held-out
# set (tests/data/heldout/pilot-test.jsonl.gz, 1241 structures of 40
# molecules; nadir energy --gradient against the xtb forces), the Spearman
# correlation with a structure's force MAE is 0.70 for the largest per-atom
# force spread and 0.49 for the energy spread per atom; within one molecule
# (which is what the per-molecule cap chooses among) the median correlations
# are 0.48 and 0.06. The energy spread of a whole molecule is mostly an offset
# shared by its structures, which relative energies do not feel; the force
# spread is local and does not grow with the molecule's size.
#
# How the round's data enters training (not done here: the lead retrains),
# with the datasets of tools/make-dataset.sh (one header line, then
# structures: keep the first file's header only):
#   { cat data/dataset/train.jsonl; grep -h '"elements"' data/dataset/basis.jsonl \
#       data/active/round1/active.jsonl; } > data/active/round1/train+active.jsonl
#   nadir train data/active/round1/train+active.jsonl -o round1.model --members 4
# or, at a fraction of the cost, refine the model that picked them:
#   nadir train data/active/round1/train+active.jsonl -o round1.model --start-from MODEL
# The trainer splits by molecule key, so some exploration molecules land in its
# validation set; explore-NNNNN keys never collide with training keys.
# "After" figures: the retrained model on the same picks and on the held-out
# set, beside the "before" ones (WORK/before.json, and the same model on the
# held-out set):
#   nadir evaluate round1.model data/active/round1/active.jsonl
#   nadir evaluate round1.model data/dataset/test.jsonl      (and large.jsonl)
# The picks were chosen by the old model, so their "after" errors are on
# molecules now trained on: the held-out figures are the honest measure; a
# next round on molecules no round used (--round 2 --model round1.model
# --skip 100) gives fresh "before" figures.
#
# Cost, measured with the pilot model at nice 10 on 2 cores shared with a
# nice-19 labelling run and other engineers' builds (load 5-8), on the first
# 10 molecules of explore.smi with the defaults: the conformer search 17-171 s
# per molecule (median ~55 s; 12.5 min for the 10), the most for the largest,
# since every distinct minimum gets a normal-mode check and the pilot finds a
# new minimum in most candidates (14-37 from 48); relaxation paths,
# collection and scoring of the 1738 structures visited ~15 s; labelling the
# 40 picks 150 s, two minutes of it the 3 audits (6n single points each, for
# 33-46 atoms). The default 100 molecules: ~2.5 hours; all 400: ~9 hours.
set -euo pipefail

ROOT=$(cd "$(dirname "$0")/.." && pwd)
PY=/usr/bin/python3
HELP=$ROOT/tools/dataset/active.py

usage() {
  cat <<'EOF'
usage: tools/active-learning.sh [options]

One active-learning round: conformer searches and relaxation paths with the
model on molecules outside its training and held-out sets, the structures its
ensemble members disagree on most, labelled with the reference method into
WORK/active.jsonl, and the model's errors on them. Seeded and resumable: run
the same command again after an interruption and it continues where it
stopped. Retraining is not part of it (see the header of this script).

  --model FILE         the model explored and scored (default the bundled
                       potential/models/default.model); an ensemble
  --molecules FILE     the exploration list (default tools/molecules/explore.smi)
  --count N            use its first N molecules (default 100; 0: all)
  --skip S             ... after leaving out its first S (default 0: a later
                       round explores molecules no earlier round used)
  --round K            round number: the default work directory and the tag
                       of the labels (default 1)
  --work DIR           work directory (default data/active/roundK)
  --seed S             seed of the searches, embeddings and audit (default 1)
  --threads N          threads of the searches, relaxations and labelling
                       (default 2)
  --tries N            conformer search budget: candidates per molecule (default 48)
  --quiet-rounds K     the search stops after K batches without a new minimum
                       (default 2)
  --embeddings N       relaxation paths per molecule (default 3)
  --per-molecule C     structures picked per molecule at most (default 4)
  --min-spread F       pick nothing whose largest per-atom force spread is
                       below F kcal/mol/A (default 5)
  --energy-tol E       structures of one molecule whose model energies differ
                       by less than E kcal/mol count as one (default 0.05)
  --distance-tol D     so do those whose interatomic distances differ by less
                       than D angstrom (RMS over all pairs; default 0.05)
  --picks N            label at most the N highest-scored picks (default 1000;
                       0: no limit)
  --audit N            picks audited (gradient against finite differences of
                       the reference energies; default 3)
  --help               this text

Environment: NADIR (the program, default build/nadir), ND_REFERENCE (the
reference command, default tools/xtb-single-point).

Output: WORK/active.jsonl (the labels; dataset format of potential/dataset.h,
tag "active learning round K"), WORK/picked.tsv (each pick: molecule, where
it came from, spreads, model energy), WORK/before.json and before.txt (nadir
evaluate of the model on the labels), WORK/summary.json, WORK/logs/.

examples:
  nice -n 10 tools/active-learning.sh --count 20
  tools/active-learning.sh --round 2 --model round1.model --skip 100 --count 100
EOF
}

main() {
# ---------------------------------------------------------------- options
MODEL=$ROOT/potential/models/default.model MOLS=$ROOT/tools/molecules/explore.smi COUNT=100 SKIP=0 ROUND=1 WORK=""
SEED=1 THREADS=2 TRIES=48 QUIET=2 EMBED=3 CAP=4 MINSPREAD=5 ETOL=0.05 DTOL=0.05 PICKS=1000 AUDIT=3
while [ $# -gt 0 ]; do
  case "$1" in --help|-h) usage; exit 0 ;; esac
  [ $# -ge 2 ] || { echo "active-learning: $1 needs a value (see --help)" >&2; exit 2; }
  case "$1" in
    --model) MODEL=$2 ;;
    --molecules) MOLS=$2 ;;
    --count) COUNT=$2 ;;
    --skip) SKIP=$2 ;;
    --round) ROUND=$2 ;;
    --work) WORK=$2 ;;
    --seed) SEED=$2 ;;
    --threads) THREADS=$2 ;;
    --tries) TRIES=$2 ;;
    --quiet-rounds) QUIET=$2 ;;
    --embeddings) EMBED=$2 ;;
    --per-molecule) CAP=$2 ;;
    --min-spread) MINSPREAD=$2 ;;
    --energy-tol) ETOL=$2 ;;
    --distance-tol) DTOL=$2 ;;
    --picks) PICKS=$2 ;;
    --audit) AUDIT=$2 ;;
    *) echo "active-learning: unknown option '$1' (see --help)" >&2; exit 2 ;;
  esac
  shift 2
done
for v in "$COUNT" "$SKIP" "$ROUND" "$SEED" "$THREADS" "$TRIES" "$QUIET" "$EMBED" "$CAP" "$PICKS" "$AUDIT"; do
  case $v in ''|*[!0-9]*) echo "active-learning: '$v' is not a whole number (see --help)" >&2; exit 2 ;; esac
done
for v in "$MINSPREAD" "$ETOL" "$DTOL"; do
  [[ $v =~ ^[0-9]+([.][0-9]*)?$ ]] || { echo "active-learning: '$v' is not a number >= 0 (see --help)" >&2; exit 2; }
done
[ -f "$MODEL" ] || { echo "active-learning: model $MODEL not found" >&2; exit 2; }
[ -f "$MOLS" ] || { echo "active-learning: molecule list $MOLS not found" >&2; exit 2; }
MODEL=$(cd "$(dirname "$MODEL")" && pwd)/$(basename "$MODEL")
: "${WORK:=$ROOT/data/active/round$ROUND}"
mkdir -p "$WORK"/{bin,chunks,logs}
WORK=$(cd "$WORK" && pwd)
NADIR=${NADIR:-$ROOT/build/nadir}
[ -x "$NADIR" ] || { echo "active-learning: $NADIR not built (run make)" >&2; exit 1; }
# A private copy of the program: others may rebuild build/ during a long run.
cp "$NADIR" "$WORK/bin/nadir.tmp" && mv "$WORK/bin/nadir.tmp" "$WORK/bin/nadir"
# The compiled reference wrapper built beside it (same answers as
# tools/xtb-single-point, half the cost per structure), else the script.
REF=${ND_REFERENCE:-$ROOT/tools/xtb-single-point}
if [ -z "${ND_REFERENCE:-}" ] && [ -x "$(dirname "$NADIR")/xtb-single-point" ]; then
  cp "$(dirname "$NADIR")/xtb-single-point" "$WORK/bin/xtb-single-point.tmp"
  mv "$WORK/bin/xtb-single-point.tmp" "$WORK/bin/xtb-single-point"
  REF=$WORK/bin/xtb-single-point
fi
NADIR=$WORK/bin/nadir
[ -n "${ND_REFERENCE:-}" ] || ND_DEPS_EXTRA=xtb "$ROOT/tools/deps.sh"
LOG=$WORK/logs/run.log
START=$(date +%s)
say() { echo "active-learning [$(date -u +%H:%M:%S)] $*" | tee -a "$LOG" >&2; }

# Scores from two models must not mix: the work directory remembers its
# model by its weights and settings (the file's bytes change when only its
# provenance does).
SUM=$($PY "$HELP" fingerprint "$MODEL")
if [ -f "$WORK/model.key" ] && [ "$(cat "$WORK/model.key")" != "$SUM" ]; then
  echo "active-learning: $WORK was explored with another model (fingerprint $(cat "$WORK/model.key"), not $SUM);" \
       "use a new --work or --round for $MODEL" >&2
  exit 2
fi
echo "$SUM" >"$WORK/model.key"
# The chunks' files are reused as they are, so the list and settings that
# made them must not change either (a larger --count may).
SKEY="list $(sha256sum "$MOLS" | cut -c1-16) skip $SKIP seed $SEED tries $TRIES quiet-rounds $QUIET embeddings $EMBED"
if [ -f "$WORK/search.key" ] && [ "$(cat "$WORK/search.key")" != "$SKEY" ]; then
  echo "active-learning: $WORK was explored with $(cat "$WORK/search.key"), not $SKEY;" \
       "use a new --work or --round" >&2
  exit 2
fi
echo "$SKEY" >"$WORK/search.key"
say "work $WORK, model $MODEL, molecules: $COUNT after the first $SKIP of $MOLS, seed $SEED, threads $THREADS"
say "search budget $TRIES candidates ($QUIET quiet batches), $EMBED relaxation paths per molecule;" \
    "picks: $CAP per molecule, force spread >= $MINSPREAD, near duplicates within $ETOL kcal/mol or $DTOL A," \
    "at most $PICKS"
export OMP_NUM_THREADS=$THREADS

# ---------------------------------------------------------------- molecules
M=$ROOT/tools/molecules
$PY "$HELP" molecules "$MOLS" "$WORK/chunks" "$COUNT" --skip "$SKIP" \
    --exclude "$M/small.smi,$M/large.smi,$M/basis.smi" \
    >"$WORK/chunks.txt.tmp"
mv "$WORK/chunks.txt.tmp" "$WORK/chunks.txt"
n=0; while read -r c; do n=$((n + $(grep -c . "$c"))); done <"$WORK/chunks.txt"
say "molecules: $n in $(grep -c . "$WORK/chunks.txt") chunks"

# ---------------------------------------------------------------- per chunk
# Runs CMD, its output appended to LOG; accepts exit 5 (some records failed,
# each named in the log) and the exit codes listed in OK (optimize: 4, no
# record converged; its paths are still paths the model took).
run() {  # [OK="4"] run LOG CMD...
  local log=$1 rc=0; shift
  "$@" </dev/null >>"$log" 2>&1 || rc=$?
  case " 0 5 ${OK:-} " in *" $rc "*) ;; *) say "failed (exit $rc): $*; see $log"; tail -3 "$log" >&2; exit 1 ;; esac
  [ $rc = 0 ] || say "some records failed or did not converge (exit $rc, see $log): ${*:1:2}"
}
while read -r c; do
  b=${c%.smi}
  cn=$(basename "$b")
  # search: every minimum found (--window -1); nadir writes the SD file and
  # the report under temporary names and renames them, so both there = done
  if [ ! -f "$b.conformers.sdf" ] || [ ! -f "$b.search.json" ]; then
    say "search $cn"
    run "$WORK/logs/search.log" "$NADIR" conformers "$c" --model "$MODEL" --window -1 --max-tries "$TRIES" \
        --quiet-rounds "$QUIET" --seed "$SEED" --threads "$THREADS" -o "$b.conformers.sdf" --report "$b.search.json"
  fi
  # paths: embeddings, then every accepted step of their relaxation
  [ -f "$b.embed.sdf" ] || run "$WORK/logs/paths.log" "$NADIR" build "$c" -o "$b.embed.sdf" --count "$EMBED" \
      --seed "$SEED"
  [ -f "$b.embed.xyz" ] || run "$WORK/logs/paths.log" "$NADIR" convert "$b.embed.sdf" "$b.embed.xyz"
  if [ ! -f "$b.paths.done" ]; then
    rm -f "$b.paths.xyz"
    OK=4 run "$WORK/logs/paths.log" "$NADIR" optimize "$b.embed.xyz" --model "$MODEL" --trajectory "$b.paths.xyz" \
        -o "$b.relaxed.xyz" --report "$b.paths.json"
    touch "$b.paths.done"
  fi
  [ -f "$b.visited.xyz" ] || $PY "$HELP" collect "$b.visited.xyz" --embeddings "$b.embed.sdf" \
      --conformers "$b.search.json" --paths "$b.paths.xyz" --relaxed "$b.relaxed.xyz" --stats "$b.collect.json"
  if [ ! -f "$b.scores.tsv" ] && [ ! -s "$b.visited.xyz" ]; then
    $PY "$HELP" score /dev/null "$b.visited.xyz" "$b.scores.tsv"   # nothing visited: an empty table
  elif [ ! -f "$b.scores.tsv" ]; then
    rc=0
    "$NADIR" energy "$b.visited.xyz" --model "$MODEL" --json --gradient >"$b.energy.json" \
        2>>"$WORK/logs/score.log" || rc=$?
    [ $rc = 0 ] || [ $rc = 5 ] || { say "scoring $cn failed (exit $rc), see $WORK/logs/score.log"; exit 1; }
    $PY "$HELP" score "$b.energy.json" "$b.visited.xyz" "$b.scores.tsv" --model-info "$WORK/model.json" \
        2>>"$WORK/logs/score.log"
    rm -f "$b.energy.json"  # forces of every atom: large, and the table holds what is needed
    say "$cn: $(($(grep -c . "$b.scores.tsv") - 1)) structures visited and scored"
  fi
done <"$WORK/chunks.txt"

# ---------------------------------------------------------------- pick
# More molecules (a larger --count) or other pick settings pick again; the
# labels made already stay in active.jsonl and nadir label skips them.
PKEY="$(while read -r c; do basename "$c"; done <"$WORK/chunks.txt" | tr '\n' ' ')"
PKEY="${PKEY}cap $CAP min $MINSPREAD tol $ETOL $DTOL picks $PICKS"
if [ -f "$WORK/picked.xyz" ] && [ "$(cat "$WORK/pick.key" 2>/dev/null)" != "$PKEY" ]; then
  say "molecules or pick settings changed: picking again"
  rm -f "$WORK/picked.xyz"
fi
if [ ! -f "$WORK/picked.xyz" ]; then
  rm -f "$WORK/label.done" "$WORK/before.json"   # new picks: label and evaluate again
  # the pick's only input is the chunks' score tables: its own chunk list
  $PY "$HELP" pick "$WORK/chunks.txt" "$WORK/picked.xyz" "$WORK/picked.tsv" --stats "$WORK/pick.json" \
      --per-molecule "$CAP" --min-spread "$MINSPREAD" --energy-tol "$ETOL" --distance-tol "$DTOL" \
      --picks "$PICKS" 2>&1 | tee -a "$LOG" >&2
  echo "$PKEY" >"$WORK/pick.key"
fi

# ---------------------------------------------------------------- label
if [ ! -f "$WORK/label.done" ]; then
  n=$(grep -c -E '^[0-9]+$' "$WORK/picked.xyz" || true)
  if [ "$n" -gt 0 ]; then
    say "labelling $n picks"
    rc=0
    "$NADIR" label "$WORK/picked.xyz" -o "$WORK/active.jsonl" --potential-command "$REF" --key-from title \
        --threads "$THREADS" --audit "$AUDIT" --seed "$SEED" --tag "active learning round $ROUND" \
        </dev/null >>"$WORK/logs/label.log" 2>&1 || rc=$?
    if [ $rc != 0 ] && [ $rc != 5 ]; then
      say "labelling failed (exit $rc), see $WORK/logs/label.log"; tail -3 "$WORK/logs/label.log" >&2; exit 1
    fi
    [ $rc = 5 ] && say "some picks failed or were refused by the audit (see $WORK/logs/label.log)"
  fi
  touch "$WORK/label.done"
fi

# ---------------------------------------------------------------- evaluate
if [ ! -f "$WORK/before.json" ] && [ -s "$WORK/active.jsonl" ]; then
  evaluate() {  # evaluate OUT [--json]
    "$NADIR" evaluate "$MODEL" "$WORK/active.jsonl" --threads "$THREADS" "${@:2}" >"$1" 2>>"$WORK/logs/evaluate.log" \
      || { say "nadir evaluate failed, see $WORK/logs/evaluate.log"; exit 1; }
  }
  evaluate "$WORK/before.txt"
  evaluate "$WORK/before.json.tmp" --json
  mv "$WORK/before.json.tmp" "$WORK/before.json"
fi

# ---------------------------------------------------------------- summary
$PY "$HELP" report "$WORK" | tee -a "$LOG"
grep -h "audit: " "$WORK/logs/label.log" 2>/dev/null | tail -n "$AUDIT" | sed 's/^/  /' || true
say "done in $(( $(date +%s) - START )) s"
}

# The whole run is one function, read before it starts, and the exit is on
# the same line as the call (bash reads on from its old offset once the
# function returns: a separate line after an edit could be any text), so
# editing this file while a run is going does not disturb it.
main "$@"; exit $?

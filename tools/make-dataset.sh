#!/bin/bash
# Builds nadir's training and test sets from scratch: reference energies and
# forces (GFN2-xTB single points through tools/xtb-single-point) for
# structures of the molecules in tools/molecules/. Run by `make dataset`.
#
#   tools/make-dataset.sh [--pilot] [options]        (--help lists them)
#
# Stages (each writes its own files under the work directory, default
# data/dataset/, and is skipped on a restart when its files are there; the
# labelling itself resumes structure by structure, so killing the run at any
# point loses at most the structures being labelled):
#   split      molecule split, seeded: 10% of small.smi held out entirely
#              (test), the rest train; large.smi is a third set (extension
#              test) that never enters training; basis.smi (hand-written
#              small molecules the generated list lacks, such as water,
#              ammonia and ethane: the experiment checks need them) is a
#              fourth, always trained on
#   conformers distance-geometry embeddings from distinct starts (nadir build)
#   torsions   shapes with rotatable bonds turned by random angles (our own
#              script; clash check), from the conformers
#   relax      relaxation paths: nadir's L-BFGS with xtb single points as the
#              potential, on a few conformers per molecule (more for the test
#              set: its minima give the relative conformer energies of the
#              held-out evaluation); every k-th frame, the minimum itself, and
#              small displacements about the minimum (half the thermal size)
#   thermal    Gaussian displacements of conformers and torsion-varied shapes
#              (RMS per atom 0.05 A heavy, 0.10 A hydrogen, times a per-
#              structure scale in [0.5, 1.3]; the size of thermal motion at
#              300-600 K, common practice, no source); after relax, so that an
#              interrupted run has the near-minimum structures first
#   inversion  basis set only: umbrella inversion paths of the amines of
#              tools/molecules/inversion.smi (tools/dataset/inversion.py: the
#              nitrogen from its pyramid through planar to inverted, 13
#              steps, each also with 4 small displacements), from the
#              reference method's own minimum, and 24 in-plane bends of each
#              planar frame (up to 15 degrees per substituent); without them
#              the model never saw a planar amine nitrogen
#   modes      basis set only: the reference Hessian at each molecule's
#              lowest minimum (nadir modes --potential-command) and
#              displacements along its normal modes, one mode at a time at
#              harmonic energies of 0.3, 1.2 and 3 kcal/mol both ways, and all
#              modes at once sampled at 300 and 900 K (tools/dataset/modes.py)
#   rotors     train and basis sets: the hydrogens of every O-H, N-H and
#              S-H rotor of each relaxed minimum of the first relaxation run
#              turned about that bond in steps of 30 degrees, one rotor at a
#              time, rigidly (the torsions stage turns only bonds between
#              heavy atoms); the held-out sets stay as they were, so their
#              figures compare across models
#   scans      relaxed torsion scans (nadir optimize --scan, xtb single points)
#              of one rotatable bond on a seeded fraction of the molecules
#   summary    counts, element counts, energy and force ranges (summary.json),
#              and the held-out sets in compact form (compact/)
# Every labelling call audits a random sample of its structures (gradient
# against central differences of the energies, nadir label --audit); labels
# that fail are refused.
#
# Output: WORK/train.jsonl, WORK/test.jsonl, WORK/large.jsonl, WORK/basis.jsonl
# (train on train + basis; dataset format
# of potential/dataset.h; "tag" says which stage made each structure),
# WORK/summary.json, WORK/compact/{test,large}.jsonl.gz, WORK/logs/.
#
# Cost, measured on this machine during the pilot (2 cores shared with other
# engineers' builds and tests; GFN2-xTB through the wrapper, one single point
# per core, OMP_NUM_THREADS=1, nice 19, one labelling thread):
#   labelling, small molecules (10-38 atoms, ~24 on average), wall time per
#     structure, audit included: conformers 0.29 s (1760 in 510 s), torsion-
#     varied 0.28 s (854 in 242 s), thermal 0.15 s (2614 in 385 s), relaxation
#     path frames 0.16 s; i.e. 12,000-25,000 structures per hour per core,
#     depending on how busy the machine is (single point alone: ~0.1 s)
#   single point, large set (49 atoms measured): ~0.37 s
#   audit of one structure: 6n single points (~15 s for 24 atoms); every
#     audited structure so far agreed to better than 0.01 kcal/mol/A
#   relaxation (L-BFGS, Lindh preconditioner, xtb as the potential): median
#     28 steps, 40 single points, 3.8 s per conformer (40 in 152 s)
#   torsion scan, 12 angles relaxed: ~300 single points, ~30 s (small)
# Measured in the full run (2 cores, other work beside it at times; the
# summary's table): with the compiled wrapper (build/xtb-single-point)
#   thermal labels 0.058 s each (51,840 in 50 min, 2 at a time), against
#   0.15-0.3 s through the Python script; a torsion scan 60-120 s, not
#   ~30 s (12 relaxations of ~25 steps each), so the scans of 6% of the
#   training molecules (99) take ~1.5 hours on 2 cores; the rotors stage
#   (2026-12-03): 10,252 training structures in 471 s on 2 cores
# Full run with the defaults (per small training molecule: 8 conformers, 8
# torsion-varied, 40 thermal, one relaxation path giving ~7 frames + the
# minimum + 2 near it, a scan on 6% of molecules: ~67 structures; per
# held-out molecule 8 relaxations, ~130 structures):
#   train 2,160 x 67 = ~145,000 structures x 0.2 s         ~ 8 core-hours
#         relaxations 2,160 x 4 s                           ~ 2.5 core-hours
#         scans 130 x 30 s                                  ~ 1 core-hour
#   test    240 x 130 = ~31,000 structures + 1,920 relaxations ~ 4 core-hours
#   large    60 x ~100 = ~6,000 structures (0.4 s) + 180 relaxations of
#            ~100 steps (measured 2026-12-03: the 180 and their 3,777
#            labels took 46 min on 2 cores)                 ~ 3 core-hours
#   basis    27 x ~100 = ~2,700 tiny structures                ~ 0.1 core-hour
#   total ~185,000 structures, ~20 core-hours: ~10-11 hours on 2 cores
#   (estimated from the measured rates above; the run appends its own
#   measured times to WORK/logs/timing.txt and the summary prints them).
# Pilot (--pilot: 400 + 40 molecules, ~12 structures each, then one
# relaxation per training molecule and 4 per test molecule): the ~5,800
# cheap structures took 19 min on one thread (23:11-23:30 UTC), the 160 test
# relaxations ~12 min, the 400 training ones ~40 min.
set -euo pipefail

ROOT=$(cd "$(dirname "$0")/.." && pwd)
PY=/usr/bin/python3
HELP=$ROOT/tools/dataset/structures.py

usage() {
  cat <<'EOF'
usage: tools/make-dataset.sh [--pilot] [options]

Builds the reference training set (train.jsonl), the held-out molecules'
set (test.jsonl) and the larger-molecule extension set (large.jsonl) under
the work directory. Seeded and resumable: run the same command again after an
interruption and it continues where it stopped.

  --pilot              small quick set: 400 training and 40 test molecules,
                       ~12 structures each (4 conformers, 2 torsion-varied, one
                       displacement of each, then one relaxation path per
                       training molecule and four per test molecule), work
                       directory data/pilot, one thread, no scans
  --work DIR           work directory (default data/dataset; env ND_DATASET_DIR)
  --seed S             seed of every random choice (default 1; env ND_DATASET_SEED)
  --threads N          single points run at a time (default 2; env ND_DATASET_THREADS)
  --sets LIST          which sets, of train,test,large,basis (default all
                       four; pilot: train,test)
  --stages LIST        of conformers,torsions,thermal,relax,rotors,inversion,modes,
                       scans,summary (default all)
  --train-molecules N  use the first N training molecules of the split (0: all)
  --test-molecules N   the first N held-out molecules (0: all)
  --large-molecules N  the first N larger molecules (0: all)
  --conformers N       embeddings per molecule (default 8)
  --torsions N         torsion-varied shapes per molecule (default 8)
  --thermal-conformer N  displacements per conformer (default 3)
  --thermal-torsion N  displacements per torsion-varied shape (default 2)
  --relax N            conformers relaxed per training molecule (default 1)
  --relax-skip K       training molecules: relax conformers K+1 .. K+N instead
                       of the first N (default 0), so that a later run adds
                       distinct minima to molecules relaxed before; its own
                       work files and labels (relax/train.cC.sK.rN)
  --relax-test N       conformers relaxed per held-out molecule (default 8:
                       their distinct minima give the relative conformer
                       energies and rank correlations of the evaluation)
  --relax-large N      conformers relaxed per larger molecule (default 3: 180
                       relaxations of molecules of 57 atoms on average)
  --relax-basis N      conformers relaxed per basis molecule (default 4)
  --every K            keep every K-th frame of a relaxation path (default 5)
  --thermal-minimum N  small displacements about each minimum (default 2)
  --scan-fraction F    fraction of molecules with a torsion scan (default 0.06)
  --scan-step DEG      angle step of the scans (default 30: 12 angles)
  --small FILE         the small-molecule list to split (default
                       tools/molecules/small.smi)
  --large FILE         the larger-molecule list (default tools/molecules/large.smi)
  --basis FILE         the basis list (default tools/molecules/basis.smi):
                       molecules of 1-4 heavy atoms (water, ammonia, ethane,
                       ...) that the generated list lacks, always trained on
                       (basis.jsonl, relaxed like the test set)
  --test-fraction F    fraction of small molecules held out (default 0.1)
  --audit N            structures audited per labelling call (default 3; the
                       relaxation stage audits one per four chunks of 10
                       molecules, the scans none: their structures come from
                       the same reference program as the audited ones)
  --audit-stages LIST  stages whose labelling is audited, of
                       conformers,torsions,thermal,relax,rotors (default all five)
  --store DIR          label store to continue from and to save into (default
                       for the full run in the default work directory: labels/
                       of the repository; otherwise none): at the
                       start, the labels and run state it holds are put into
                       the work directory, at the end the new labels are
                       packed into it (tools/dataset/store.py; run
                       'tools/dataset/store.py save WORK DIR' to save a run
                       that is still going)
  --help               this text

Environment: ND_DATASET_DIR, ND_DATASET_SEED, ND_DATASET_THREADS as above;
NADIR (the program, default build/nadir), ND_REFERENCE (the reference command,
default build/xtb-single-point, compiled from tools/xtb_single_point.c,
when built, else the script tools/xtb-single-point).

examples:
  make dataset
  nice -n 19 tools/make-dataset.sh --pilot
  tools/make-dataset.sh --pilot --train-molecules 800     # extend the pilot
EOF
}

main() {
# ---------------------------------------------------------------- options
WORK=${ND_DATASET_DIR:-}
SEED=${ND_DATASET_SEED:-1}
THREADS=${ND_DATASET_THREADS:-}
SETS="" STAGES="conformers,torsions,thermal,relax,rotors,inversion,modes,scans,summary"
NTRAIN="" NTEST="" NLARGE=""
CONF="" TORS="" TH_CONF="" TH_TORS="" RELAX="" RELAX_SKIP=0 RELAX_TEST="" RELAX_LARGE="" RELAX_BASIS="" EVERY=5 TH_MIN="" SCANFRAC="" AUDIT=3
AUDIT_STAGES=conformers,torsions,thermal,relax,rotors SCANSTEP=30 SMALL=$ROOT/tools/molecules/small.smi LARGE=$ROOT/tools/molecules/large.smi TESTFRAC=0.1
BASIS=$ROOT/tools/molecules/basis.smi INVERSION=$ROOT/tools/molecules/inversion.smi
PILOT=0 STORE=""
while [ $# -gt 0 ]; do
  case "$1" in
    --pilot) PILOT=1; shift; continue ;;
    --help|-h) usage; exit 0 ;;
  esac
  [ $# -ge 2 ] || { echo "make-dataset: $1 needs a value (see --help)" >&2; exit 2; }
  case "$1" in
    --work) WORK=$2 ;;
    --seed) SEED=$2 ;;
    --threads) THREADS=$2 ;;
    --sets) SETS=$2 ;;
    --stages) STAGES=$2 ;;
    --train-molecules) NTRAIN=$2 ;;
    --test-molecules) NTEST=$2 ;;
    --large-molecules) NLARGE=$2 ;;
    --conformers) CONF=$2 ;;
    --torsions) TORS=$2 ;;
    --thermal-conformer) TH_CONF=$2 ;;
    --thermal-torsion) TH_TORS=$2 ;;
    --relax) RELAX=$2 ;;
    --relax-skip) RELAX_SKIP=$2 ;;
    --every) EVERY=$2 ;;
    --thermal-minimum) TH_MIN=$2 ;;
    --relax-test) RELAX_TEST=$2 ;;
    --relax-large) RELAX_LARGE=$2 ;;
    --relax-basis) RELAX_BASIS=$2 ;;
    --scan-fraction) SCANFRAC=$2 ;;
    --audit) AUDIT=$2 ;;
    --scan-step) SCANSTEP=$2 ;;
    --audit-stages) AUDIT_STAGES=$2 ;;
    --small) SMALL=$2 ;;
    --large) LARGE=$2 ;;
    --basis) BASIS=$2 ;;
    --test-fraction) TESTFRAC=$2 ;;
    --store) STORE=$2 ;;
    *) echo "make-dataset: unknown option '$1' (see --help)" >&2; exit 2 ;;
  esac
  shift 2
done
if [ $PILOT = 1 ]; then
  : "${WORK:=$ROOT/data/pilot}" "${THREADS:=1}" "${SETS:=train,test}"
  : "${NTRAIN:=400}" "${NTEST:=40}" "${NLARGE:=0}"
  : "${CONF:=4}" "${TORS:=2}" "${TH_CONF:=1}" "${TH_TORS:=1}" "${RELAX:=1}" "${RELAX_TEST:=4}" "${RELAX_LARGE:=3}" "${RELAX_BASIS:=4}" "${TH_MIN:=1}" "${SCANFRAC:=0}"
  AUDIT=2
else
  [ -n "$WORK" ] || : "${STORE:=$ROOT/labels}"
  : "${WORK:=$ROOT/data/dataset}" "${THREADS:=2}" "${SETS:=train,test,large,basis}"
  : "${NTRAIN:=0}" "${NTEST:=0}" "${NLARGE:=0}"
  : "${CONF:=8}" "${TORS:=8}" "${TH_CONF:=3}" "${TH_TORS:=2}" "${RELAX:=1}" "${RELAX_TEST:=8}" "${RELAX_LARGE:=3}" "${RELAX_BASIS:=4}" "${TH_MIN:=2}" "${SCANFRAC:=0.06}"
fi
case $RELAX_SKIP in ''|*[!0-9]*) echo "make-dataset: --relax-skip wants a whole number, not '$RELAX_SKIP'" >&2; exit 2 ;; esac
NADIR=${NADIR:-$ROOT/build/nadir}
# A private copy of the program: others may rebuild build/ during a long run.
mkdir -p "$WORK/bin"
[ -x "$NADIR" ] || { echo "make-dataset: $NADIR not built (run make)" >&2; exit 1; }
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
has() { case ",$1," in *",$2,"*) return 0 ;; esac; return 1; }

# ---------------------------------------------------------------- checks
if [ -z "${ND_REFERENCE:-}" ]; then
  ND_DEPS_EXTRA=xtb "$ROOT/tools/deps.sh"
fi
[ -x "$NADIR" ] || { echo "make-dataset: $NADIR not built (run make)" >&2; exit 1; }
mkdir -p "$WORK"/{split,gen,labels,logs,relax,scans}
WORK=$(cd "$WORK" && pwd)
LOG=$WORK/logs/run.log
START=$(date +%s)
say() { echo "make-dataset [$(date -u +%H:%M:%S)] $*" | tee -a "$LOG" >&2; }
: "${STORE:=none}"
if [ "$STORE" != none ] && [ -d "$STORE" ]; then
  "$ROOT/tools/dataset/store.py" load "$STORE" "$WORK" | tee -a "$LOG" >&2
fi
say "work $WORK, seed $SEED, threads $THREADS, sets $SETS, stages $STAGES"
say "per molecule: $CONF conformers, $TORS torsion-varied, thermal $TH_CONF/conformer $TH_TORS/torsion," \
    "$RELAX relaxations (every $EVERY-th frame, $TH_MIN near each minimum), scans on $SCANFRAC"
# Parallel work: nadir label --threads, and the records of a relaxation chunk
# (OMP_NUM_THREADS); one single point per core, never threads inside one.
export OMP_NUM_THREADS=1

# Labels IN (XYZ, title = molecule key) into SET.jsonl with TAG; a marker file
# makes a finished call free on a restart (nadir label would skip the
# structures anyway, but would audit again).
label() {  # label SET TAG IN NAME [AUDIT]
  local set=$1 tag=$2 in=$3 name=$4 audit=${5:-$AUDIT}
  has "$AUDIT_STAGES" "${name%%.*}" || audit=0
  local done=$WORK/labels/$set.$name.done
  [ -f "$done" ] && return 0
  [ -s "$in" ] || { touch "$done"; return 0; }
  local t0 rc=0 n
  t0=$(date +%s.%N)
  n=$(grep -c -E '^[0-9]+$' "$in" || true)
  "$NADIR" label "$in" -o "$WORK/$set.jsonl" --potential-command "$REF" --key-from title \
      --threads "$THREADS" --audit "$audit" --seed "$SEED" --tag "$tag" \
      </dev/null >>"$WORK/logs/label.$set.log" 2>&1 || rc=$?
  if [ $rc != 0 ] && [ $rc != 5 ]; then
    say "label $set/$name failed (exit $rc), see $WORK/logs/label.$set.log"; tail -3 "$WORK/logs/label.$set.log" >&2
    return 1
  fi
  [ $rc = 5 ] && say "label $set/$name: some structures failed or were refused by the audit (see log)"
  touch "$done"
  echo "$set $name $n $(date +%s.%N) $t0" >>"$WORK/logs/timing.txt"
  say "labelled $set/$name: $n structures in $(awk -v a="$t0" -v b="$(date +%s.%N)" 'BEGIN{printf "%.0f", b-a}') s" \
      "($(grep -c . "$WORK/$set.jsonl") lines in $set.jsonl)"
}

# ---------------------------------------------------------------- split
if [ ! -f "$WORK/split/test.smi" ]; then
  $PY "$HELP" split "$SMALL" "$WORK/split" --seed "$SEED" --test-fraction "$TESTFRAC"
fi
$PY "$HELP" head "$WORK/split/train.smi" "$WORK/split/train.use.smi" "$NTRAIN"
$PY "$HELP" head "$WORK/split/test.smi" "$WORK/split/test.use.smi" "$NTEST"
$PY "$HELP" head "$LARGE" "$WORK/split/large.use.smi" "$NLARGE"
$PY "$HELP" head "$BASIS" "$WORK/split/basis.use.smi" 0
for s in train test large basis; do
  has "$SETS" $s && say "set $s: $(grep -c . "$WORK/split/$s.use.smi") molecules"
done

# Generated files are named by their parameters, so changing a count makes
# new files; the structures of molecules already done come out identical
# (seeded per molecule) and nadir label skips them.
for s in train test large basis; do
  has "$SETS" $s || continue
  case $s in train) nm=$NTRAIN ;; test) nm=$NTEST ;; large) nm=$NLARGE ;; basis) nm=0 ;; esac
  G=$WORK/gen/$s.n$nm
  # --- conformers
  if has "$STAGES" conformers || has "$STAGES" torsions || has "$STAGES" thermal || has "$STAGES" relax \
     || has "$STAGES" scans; then
    if [ ! -f "$G.c$CONF.sdf" ]; then
      "$NADIR" build "$WORK/split/$s.use.smi" -o "$G.c$CONF.sdf.tmp" --count "$CONF" --seed "$SEED" \
          2>>"$WORK/logs/build.log" || { rc=$?; [ $rc = 5 ] || { say "build $s failed ($rc)"; exit 1; }; }
      mv "$G.c$CONF.sdf.tmp" "$G.c$CONF.sdf"
      "$NADIR" convert "$G.c$CONF.sdf" "$G.c$CONF.xyz" 2>>"$WORK/logs/build.log"
      say "conformers $s: $(grep -c '^\$\$\$\$' "$G.c$CONF.sdf") structures"
    fi
  fi
done

# The stages that label generated structures, one after the other over every
# set.
generated() {  # generated STAGE...
for stage in "$@"; do
  has "$STAGES" $stage || continue
  for s in train test large basis; do
    has "$SETS" $s || continue
    case $s in train) nm=$NTRAIN ;; test) nm=$NTEST ;; large) nm=$NLARGE ;; basis) nm=0 ;; esac
    G=$WORK/gen/$s.n$nm
    case $stage in
      conformers)
        label $s conformer "$G.c$CONF.xyz" "conformers.n$nm.c$CONF" ;;
      torsions)
        [ -f "$G.c$CONF.t$TORS.xyz" ] || $PY "$HELP" torsions "$G.c$CONF.sdf" "$G.c$CONF.t$TORS.xyz" \
            --per-molecule "$TORS" --seed "$SEED" 2>>"$LOG"
        label $s "torsion varied" "$G.c$CONF.t$TORS.xyz" "torsions.n$nm.c$CONF.t$TORS" ;;
      thermal)
        [ -f "$G.c$CONF.th$TH_CONF.xyz" ] || $PY "$HELP" thermal "$G.c$CONF.xyz" "$G.c$CONF.th$TH_CONF.xyz" \
            --per-structure "$TH_CONF" --seed "$SEED" 2>>"$LOG"
        label $s thermal "$G.c$CONF.th$TH_CONF.xyz" "thermal.n$nm.c$CONF.th$TH_CONF"
        # the torsion-varied shapes are regenerated (seeded, the same) when
        # this stage runs without the torsions stage on a new machine; they
        # were skipped silently before
        [ -f "$G.c$CONF.t$TORS.xyz" ] || [ "$TORS" -le 0 ] || $PY "$HELP" torsions "$G.c$CONF.sdf" \
            "$G.c$CONF.t$TORS.xyz" --per-molecule "$TORS" --seed "$SEED" 2>>"$LOG"
        if [ -f "$G.c$CONF.t$TORS.xyz" ]; then
          [ -f "$G.c$CONF.t$TORS.th$TH_TORS.xyz" ] || $PY "$HELP" thermal "$G.c$CONF.t$TORS.xyz" \
              "$G.c$CONF.t$TORS.th$TH_TORS.xyz" --per-structure "$TH_TORS" --seed "$SEED" 2>>"$LOG"
          label $s thermal "$G.c$CONF.t$TORS.th$TH_TORS.xyz" "thermal.n$nm.c$CONF.t$TORS.th$TH_TORS"
        fi ;;
    esac
  done
done
}
# Relaxations come before the thermal displacements of the conformers: their
# minima give the held-out evaluation, and near-minimum structures matter
# most for conformer energies, so an interrupted run has those first.
generated conformers torsions

# ---------------------------------------------------------------- relax
# In chunks of CHUNK molecules, each finished chunk marked, so an interrupted
# run redoes at most one chunk's relaxations.
CHUNK=10
if has "$STAGES" relax; then
  # the test minima first (the evaluation needs them), then the minima and
  # paths the model learns from (training on embedded conformers and torsion
  # shapes alone leaves it without a single relaxed structure, the kind it
  # must rank), the larger molecules' (an extension test only, and the
  # costliest) last
  for s in test basis train large; do
    has "$SETS" $s || continue
    case $s in train) RELAX_S=$RELAX ;; test) RELAX_S=$RELAX_TEST ;; large) RELAX_S=$RELAX_LARGE ;; *) RELAX_S=$RELAX_BASIS ;; esac
    [ "$RELAX_S" -gt 0 ] || continue
    # the run's name in work files and label markers: skipped conformers
    # (training molecules only) get their own, since they are other structures
    RN=c$CONF.r$RELAX_S
    [ $s = train ] && [ "$RELAX_SKIP" -gt 0 ] && RN=c$CONF.s$RELAX_SKIP.r$RELAX_S
    SKIP_S=0; [ $s = train ] && SKIP_S=$RELAX_SKIP
    case $s in train) nm=$NTRAIN ;; test) nm=$NTEST ;; large) nm=$NLARGE ;; basis) nm=0 ;; esac
    G=$WORK/gen/$s.n$nm
    R=$WORK/relax/$s.$RN
    mkdir -p "$R"
    [ -f "$R/start.n$nm.xyz" ] || $PY "$HELP" pick "$G.c$CONF.sdf" "$R/start.n$nm.xyz" --per-molecule "$RELAX_S" --skip "$SKIP_S"
    # chunk K holds molecules CHUNK*K .. of the list, named by K and its
    # molecule count, so a longer list (a larger --train-molecules) finds the
    # full chunks already relaxed
    $PY - "$R/start.n$nm.xyz" "$R" "$CHUNK" >"$R/chunks.n$nm.txt" <<'EOF'
import os, sys
src, outdir, chunk = sys.argv[1], sys.argv[2], int(sys.argv[3])
lines = open(src).read().split("\n")
mols, order, i = {}, [], 0
while i < len(lines):
    if not lines[i].strip():
        i += 1; continue
    n = int(lines[i]); key = lines[i + 1].split()[0]
    if key not in mols:
        mols[key] = []; order.append(key)
    mols[key].append("\n".join(lines[i:i + 2 + n]) + "\n"); i += 2 + n
for c in range(0, len(order), chunk):
    keys = order[c:c + chunk]
    path = "%s/chunk%04d-%02d.xyz" % (outdir, c // chunk, len(keys))
    if not os.path.exists(path):
        open(path + ".tmp", "w").write("".join("".join(mols[k]) for k in keys))
        os.replace(path + ".tmp", path)
    print(path)
EOF
    while read -r c; do
      [ -f "$c" ] || continue
      b=${c%.xyz}
      if [ ! -f "$b.opt.done" ]; then
        t0=$(date +%s)
        rm -f "$b.traj.xyz"
        rc=0
        OMP_NUM_THREADS=$THREADS "$NADIR" optimize "$c" --potential-command "$REF" --trajectory "$b.traj.xyz" -o "$b.min.xyz" \
            --report "$b.report.json" </dev/null >"$b.opt.log" 2>&1 || rc=$?
        if [ $rc != 0 ] && [ $rc != 5 ]; then say "relax $c failed (exit $rc), see $b.opt.log"; continue; fi
        touch "$b.opt.done"
        echo "relax $(basename "$b") $(grep -c -E '^[0-9]+$' "$c") $(( $(date +%s) - t0 ))" >>"$WORK/logs/timing.txt"
      fi
      cn=$(basename "$b")
      # the files to label, unless labelled already (the label store keeps
      # the done markers, not these derived files nor the trajectories)
      L=$WORK/labels/$s.relax.$cn.$RN
      [ -f "$b.frames.xyz" ] || [ -f "$L.frames.done" ] \
          || $PY "$HELP" frames "$b.traj.xyz" "$b.frames.xyz" --every "$EVERY" 2>>"$LOG"
      [ -f "$b.minima.xyz" ] || { [ -f "$L.minima.done" ] && [ -f "$L.near.done" ]; } \
          || $PY "$HELP" retitle "$b.min.xyz" "$b.minima.xyz"
      [ -f "$b.near.xyz" ] || [ -f "$L.near.done" ] || $PY "$HELP" thermal "$b.minima.xyz" "$b.near.xyz" \
          --per-structure "$TH_MIN" --seed "$SEED" --heavy 0.025 --hydrogen 0.05 2>>"$LOG"
      # one audit per four chunks: the paths hold the most strained structures
      au=0; [ "$AUDIT" -gt 0 ] && case $cn in chunk???[048]-*) au=1 ;; esac
      label $s "relaxation path" "$b.frames.xyz" "relax.$cn.$RN.frames" $au || true
      label $s minimum "$b.minima.xyz" "relax.$cn.$RN.minima" 0 || true
      label $s "thermal near minimum" "$b.near.xyz" "relax.$cn.$RN.near" 0 || true
    done <"$R/chunks.n$nm.txt"
  done
fi

generated thermal

# ---------------------------------------------------------------- rotors
# From the minima of each set's first relaxation run (relax/SET.cC.rN, not
# the --relax-skip runs), restored from the store on a new machine; the
# label name counts the minima files, so a run with more relaxed chunks
# labels a new file (nadir label skips the structures it has).
if has "$STAGES" rotors; then
  for s in train basis; do
    has "$SETS" $s || continue
    case $s in train) RELAX_S=$RELAX ;; *) RELAX_S=$RELAX_BASIS ;; esac
    R=$WORK/relax/$s.c$CONF.r$RELAX_S
    [ -d "$R" ] || continue
    mins=("$R"/chunk*.min.xyz)
    [ -f "${mins[0]}" ] || continue
    RO=$WORK/rotors/$s.c$CONF.r$RELAX_S.m${#mins[@]}.s30.xyz
    mkdir -p "$WORK/rotors"
    [ -f "$RO" ] || { cat "${mins[@]}" >"$RO.min" && $PY "$HELP" rotors "$RO.min" "$RO" --step 30 2>>"$LOG"; }
    label $s "rotor turned" "$RO" "rotors.c$CONF.r$RELAX_S.m${#mins[@]}.s30" || true
  done
fi

# ---------------------------------------------------------------- inversion
# (skipped whole once labelled: a machine continuing from the store has the
# done marker but not the paths, and need not relax the amines again)
if has "$STAGES" inversion && has "$SETS" basis && { [ ! -f "$WORK/labels/basis.inversion.done" ] \
    || [ ! -f "$WORK/labels/basis.inversion-bends.done" ]; }; then
  D=$WORK/gen/inversion rc=0
  mkdir -p "$D"
  [ -s "$D/built.sdf" ] || "$NADIR" build "$INVERSION" -o "$D/built.sdf" --seed "$SEED" 2>>"$LOG" || rc=$?
  if [ $rc = 0 ] && [ ! -s "$D/minima.xyz" ]; then
    "$NADIR" optimize "$D/built.sdf" --potential-command "$REF" -o "$D/minima.xyz" \
        </dev/null >"$D/optimize.log" 2>&1 || rc=$?
    [ $rc = 5 ] && { say "inversion: some minima not converged, see $D/optimize.log"; rc=0; }
  fi
  [ $rc = 0 ] && { [ -s "$D/paths.xyz" ] || $PY "$ROOT/tools/dataset/inversion.py" "$D/minima.xyz" "$D/paths.xyz" \
      --seed "$SEED" 2>>"$LOG" || rc=$?; }
  # the planar frames bent in plane (inversion.py --bends: why there)
  [ $rc = 0 ] && { [ -s "$D/bends.xyz" ] || $PY "$ROOT/tools/dataset/inversion.py" "$D/minima.xyz" "$D/bends.xyz" \
      --bends 24 --bend-angle 15 --seed "$SEED" 2>>"$LOG" || rc=$?; }
  if [ $rc = 0 ]; then
    label basis "inversion path" "$D/paths.xyz" inversion || true
    label basis "inversion path" "$D/bends.xyz" inversion-bends || true
  else say "inversion stage failed (exit $rc), see $LOG"; fi
fi

# ---------------------------------------------------------------- modes
# The reference method's own Hessian at the lowest minimum of every basis
# molecule (from the relax stage), and displacements along its normal modes
# (tools/dataset/modes.py: why there); skipped whole once labelled.
if has "$STAGES" modes && has "$SETS" basis && [ ! -f "$WORK/labels/basis.modes.done" ]; then
  D=$WORK/gen/modes rc=0
  mkdir -p "$D"
  [ -s "$D/lowest.xyz" ] || $PY "$ROOT/tools/dataset/modes.py" lowest "$WORK/relax/basis.c$CONF.r$RELAX_BASIS" \
      "$D/lowest.xyz" 2>>"$LOG" || rc=$?
  if [ $rc = 0 ] && [ ! -s "$D/modes.json" ]; then
    OMP_NUM_THREADS=$THREADS "$NADIR" modes "$D/lowest.xyz" --potential-command "$REF" --json \
        --animate all --animate-out "$D/animation.xyz" --frames 4 </dev/null >"$D/modes.json.tmp" 2>"$D/modes.log" || rc=$?
    [ $rc = 5 ] && { say "modes: some Hessians failed, see $D/modes.log"; rc=0; }
    [ $rc = 0 ] && mv "$D/modes.json.tmp" "$D/modes.json"
  fi
  [ $rc = 0 ] && { [ -s "$D/displaced.xyz" ] || $PY "$ROOT/tools/dataset/modes.py" displace "$D/lowest.xyz" \
      "$D/animation.xyz" "$D/modes.json" "$D/displaced.xyz" --seed "$SEED" 2>>"$LOG" || rc=$?; }
  if [ $rc = 0 ]; then label basis "normal mode" "$D/displaced.xyz" modes || true
  else say "modes stage failed (exit $rc), see $LOG"; fi
fi

# ---------------------------------------------------------------- scans
# One relaxed torsion scan (nadir optimize --scan, xtb single points) of
# molecule KEY about torsion TOR, from B.xyz; B.scan.done marks it finished.
scan_one() {  # scan_one SET B KEY TOR
  local s=$1 b=$2 key=$3 tor=$4 t0 rc=0
  t0=$(date +%s)
  OMP_NUM_THREADS=1 "$NADIR" optimize "$b.xyz" --potential-command "$REF" --scan "$tor" --scan-range "-180,$((180 - SCANSTEP)),$SCANSTEP" \
      -o "$b.scan.xyz" --report "$b.scan.json" </dev/null >"$b.scan.log" 2>&1 || rc=$?
  if [ $rc != 0 ] && [ $rc != 5 ]; then say "scan $s/$key failed (exit $rc)"; return 0; fi
  touch "$b.scan.done"
  echo "scan $s/$key $((360 / SCANSTEP)) $(( $(date +%s) - t0 ))" >>"$WORK/logs/timing.txt"
}
if has "$STAGES" scans && [ "$(awk -v f="$SCANFRAC" 'BEGIN{print (f > 0)}')" = 1 ]; then
  for s in train test large basis; do
    has "$SETS" $s || continue
    case $s in train) nm=$NTRAIN ;; test) nm=$NTEST ;; large) nm=$NLARGE ;; basis) nm=0 ;; esac
    G=$WORK/gen/$s.n$nm
    D=$WORK/scans/$s.c$CONF.f$SCANFRAC
    [ -f "$D/scans.txt" ] || $PY "$HELP" scan-setup "$G.c$CONF.sdf" "$D" --fraction "$SCANFRAC" --seed "$SEED" 2>>"$LOG"
    # the scans themselves (a relaxation per angle, one core each) run
    # THREADS at a time; after every ten, the points of those finished are
    # labelled, so an interrupted run keeps all but the last few
    scan_labels() {
      local key tor b
      while read -r key tor; do
        b=$D/$key
        [ -f "$b.scan.done" ] || continue
        [ -f "$b.points.xyz" ] || $PY "$HELP" retitle "$b.scan.xyz" "$b.points.xyz"
        label $s "torsion scan" "$b.points.xyz" "scan.$key.c$CONF.f$SCANFRAC" 0 || true
      done <"$D/scans.txt"
    }
    started=0
    while read -r key tor; do
      [ -f "$D/$key.scan.done" ] && continue
      while [ "$(jobs -rp | wc -l)" -ge "$THREADS" ]; do wait -n || true; done
      scan_one "$s" "$D/$key" "$key" "$tor" &
      started=$((started + 1))
      if [ $((started % 10)) = 0 ]; then wait; scan_labels; fi
    done <"$D/scans.txt"
    wait
    scan_labels
  done
fi

# ---------------------------------------------------------------- summary
if has "$STAGES" summary; then
  $PY "$ROOT/tools/dataset/summary.py" "$WORK" --sets "$SETS" --seconds $(( $(date +%s) - START )) | tee -a "$LOG"
fi
if [ "$STORE" != none ]; then
  "$ROOT/tools/dataset/store.py" save "$WORK" "$STORE" | tee -a "$LOG" >&2
fi
say "done in $(( $(date +%s) - START )) s; datasets in $WORK"
}

# The whole run is one function, read before it starts, and the exit is on
# the same line as the call (bash reads on from its old offset once the
# function returns: a separate line after an edit could be any text), so
# editing this file while a run is going does not disturb it.
main "$@"; exit $?

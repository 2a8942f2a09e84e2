/* The conformer search: from one molecule to its ranked, verified minima.
 *
 * Set-up, step, state (as the minimisers in optimize/minimize.h), so the
 * caller's loop shows progress and decides nothing the library should:
 *
 *   nd_search *s;
 *   nd_search_new(&s, &mol, &pot, &opt, &err);        embed, rotors, checks
 *   while ((st = nd_search_step(s, &err)) == ND_CONTINUE)  one batch each
 *       ... nd_search_stats(s)->tried, ->minima ...
 *   if (st == ND_OK) st = nd_search_finish(s, &err);     Hessian check, ranking
 *   for (i = 0; i < nd_search_count(s); i++) ... nd_search_conformer(s, i) ...
 *   nd_search_free(s);
 *
 * One step = one batch of candidates: each candidate is built (systematic
 * combination, mutation of a low minimum, or a fresh embedding), screened
 * for clashes, relaxed (candidates in parallel with OpenMP, one minimiser
 * each), checked for unchanged bonding and stereo (verify.h), and merged
 * into the set of minima found (duplicates by dedup.h). Every candidate
 * draws its random numbers from nd_rng_stream(seed, candidate number) and
 * results are merged in candidate order, so the output is the same bit for
 * bit at any thread count.
 *
 * Sampling. The dimensions are the rotors, ring flips and nitrogen
 * inversions of sample.h. When the product of their states is at most
 * opt.systematic_max (and within the budget), every combination is
 * enumerated first, applied to the first embedded structure. Then, and
 * from the start otherwise, candidates are stochastic. Follow-ups come
 * first, up to three quarters of a batch: every new minimum within the
 * window (+ 2.5 kcal/mol) queues its neighbours in torsion space, namely
 * itself with each rotor's torsion turned to minus its value (the mirror
 * image in torsion space: for a molecule without stereocentres, the
 * enantiomeric conformer, which has the same energy and its own Boltzmann
 * weight; otherwise a diastereomeric trial) and itself with one rotor
 * changed to each of its other values; queued follow-ups of the lowest
 * minima go first. The other candidates: with probability
 * opt.fresh_fraction a fresh embedding (a new distance-geometry start, so
 * new ring puckers) with random states for every dimension; otherwise a
 * mutation of a minimum already found, chosen among those within the
 * window with a bias to low energy (rank floor(k u^2) for uniform u), in
 * which one to three dimensions change (a rotor to another of its values,
 * or one time in four to a uniformly random angle; a flip or an
 * inversion applied).
 *
 * Stopping rule. After the systematic part (if any), the search stops when
 * opt.quiet_rounds consecutive batches, each started with no follow-up
 * pending, add no new minimum within opt.window of the lowest energy found
 * so far ("no new low minima"), or when opt.max_tries candidates have
 * been generated ("budget spent"). A molecule with nothing to sample (no
 * rotor, ring flip or inversion, and no ring of four or more atoms that is
 * not flat) stops after its first candidate ("nothing to sample").
 * nd_search_stats(s)->stop says which.
 *
 * Finishing. Minima within opt.window (+ 1 kcal/mol of slack) of the
 * lowest are minimised again with the tight convergence preset, checked by
 * the normal-mode analysis and repaired when they have imaginary modes
 * (optimize/repair.h; the Hessians go through nd_energy_batch, as do the
 * final energies of all checked minima, in one call), and checked again
 * for bonding and stereo. A
 * structure still not a minimum after repair, or changed, is dropped and
 * counted. Survivors are deduplicated again, ranked by energy (or by free
 * energy, E + G_RRHO from the frequencies, with opt.free_energy), cut to
 * the window and opt.max_conformers, and given Boltzmann weights at
 * opt.temperature. With an ensemble callback the spread of each relative
 * energy over the members is computed and marked above
 * opt.uncertainty_mark. */
#ifndef ND_SEARCH_H
#define ND_SEARCH_H

#include <stdint.h>

#include "conformers/dedup.h"
#include "core/energy.h"
#include "core/molecule.h"
#include "optimize/minimize.h"

/* Per-member energies of m structures of n atoms (x: m * 3n), written to
 * member_e (m * K, structure-major, K = opt.members_k). For the ensemble
 * uncertainty without conformers/ linking the potential module. Returns
 * ND_OK or an error code. */
typedef int (*nd_search_members_fn)(void *ctx, int n, int m, const double *x, double *member_e);

typedef struct nd_search_options {
    uint64_t seed;            /* random seed (1) */
    int max_tries;            /* budget: candidates generated at most (2000) */
    int batch;                /* candidates per step (16); fixed, not the thread count, so
                                 results do not depend on threads */
    int systematic_max;       /* enumerate all combinations when there are at most this many (500) */
    int quiet_rounds;         /* stopping rule: batches without a new low minimum (3) */
    double window;            /* kcal/mol; conformers reported within this of the lowest (5);
                                 < 0: no limit */
    int max_conformers;       /* at most this many reported (0: no limit) */
    double temperature;       /* K, for the Boltzmann weights (298.15) */
    double clash_ratio;       /* clash screen: distance / vdW sum below this rejects (0.35): only
                                 near-overlaps, which relax badly or break bonds; milder contacts
                                 are left to the relaxation */
    double fresh_fraction;    /* share of stochastic candidates that are fresh embeddings (0.2) */
    nd_dedup_options dedup;   /* RMSD threshold and energy tolerance (nd_dedup_defaults) */
    int check_modes;          /* 1: every reported conformer goes through the normal-mode check (1) */
    int free_energy;          /* 1: rank by free energy (implies check_modes) (0) */
    const nd_minimizer_type *method; /* NULL: L-BFGS */
    nd_minimize_options relax;       /* relaxation of candidates (ranking preset) */
    nd_search_members_fn members;    /* ensemble callback or NULL */
    void *members_ctx;
    int members_k;                   /* ensemble members */
    double uncertainty_mark;         /* kcal/mol: relative-energy spread above this is marked (0.5) */
} nd_search_options;

/* Fills *o with the defaults above. */
void nd_search_options_default(nd_search_options *o);

typedef enum nd_search_stop {
    ND_SEARCH_RUNNING = 0,   /* still sampling */
    ND_SEARCH_QUIET = 1,     /* the stopping rule: no new low minima for quiet_rounds batches */
    ND_SEARCH_BUDGET = 2,    /* max_tries candidates generated */
    ND_SEARCH_RIGID = 3      /* nothing to sample: no rotor, no ring that can pucker, no
                                invertible nitrogen; the first structure was relaxed alone */
} nd_search_stop;

/* Short fixed name of a stop reason. */
const char *nd_search_stop_name(nd_search_stop s);

/* Counts, plain data. */
typedef struct nd_search_stats {
    int rotors, ring_flips, inversions;
    double combinations;      /* product of the states of all dimensions */
    int systematic;           /* 1 if every combination was enumerated */
    long tried;               /* candidates generated */
    long clashes;             /* rejected by the clash screen before relaxation */
    long embed_failed;        /* fresh embeddings that failed */
    long relaxed;             /* candidates minimised */
    long not_converged;       /* minimisations that hit the step limit or stalled (dropped) */
    long failed;              /* minimisations where the potential failed (dropped) */
    long rejected_bonding;    /* relaxed structures whose bonds changed */
    long rejected_stereo;     /* ... whose stereocentres or tetrahedral atoms inverted */
    long rejected_double_bond;/* ... whose double bonds isomerised */
    long duplicates;          /* relaxed structures that were a minimum already found */
    int minima;               /* distinct minima found by the sampling */
    long force_calls;         /* energy+gradient evaluations in the sampling */
    long check_force_calls;   /* ... in the finishing minimisations and repairs */
    long hessian_calls;       /* ... in the Hessians */
    int batches;
    int quiet;                /* consecutive batches without a new low minimum */
    nd_search_stop stop;
    int checked;              /* minima given the normal-mode check */
    int repaired;             /* of those, with imaginary modes that were repaired */
    int not_minimum;          /* still with imaginary modes after repair (dropped) */
    int changed_in_check;     /* changed bonding or stereo in the finishing steps (dropped) */
    int merged_in_check;      /* became duplicates in the finishing steps */
    int reported;
} nd_search_counts;

/* One reported conformer. Pointers are owned by the search. */
typedef struct nd_conformer {
    const double *xyz;      /* 3n, angstrom */
    double energy;          /* kcal/mol */
    double rel_energy;      /* energy - energy of the lowest reported conformer */
    double free_energy;     /* energy + RRHO free-energy correction (NAN if not computed) */
    double rel_free_energy; /* free energy relative to the lowest (NAN if not computed) */
    double weight;          /* Boltzmann weight by the ranking key */
    double lowest_freq;     /* lowest vibrational frequency, cm^-1 (NAN if not checked) */
    int checked;            /* 1 if the normal-mode check confirmed a minimum */
    int repaired;           /* 1 if imaginary modes were repaired */
    double uncertainty;     /* ensemble spread of rel_energy, kcal/mol (NAN without ensemble) */
    int uncertain;          /* 1 if uncertainty > opt.uncertainty_mark */
    long found_at;          /* 0-based number of the candidate that first found it */
    int mirror_of;          /* 0-based rank of the lower-ranked conformer it is the mirror
                               image of (same energy within the duplicate tolerance), or -1 */
} nd_conformer;

typedef struct nd_search nd_search;

/* Prepares a search of mol (needs a bond table; copied) under pot (ctx
 * borrowed, must outlive the search). The first structure is mol's own
 * coordinates when mol->dimension is 3, else an embedding (nd_embed,
 * index 0). Stereo that mol does not state is taken from that first
 * structure and kept for the whole search. opt may be NULL for defaults.
 * ND_EINPUT (no bonds, aromatic orders, embedding failed), ND_EINVAL,
 * ND_ENOMEM. *out is freed with nd_search_free. */
int nd_search_new(nd_search **out, const nd_molecule *mol, const nd_energy *pot,
                  const nd_search_options *opt, nd_error *err);

/* Runs one batch. ND_CONTINUE while sampling goes on, ND_OK when the
 * sampling has stopped (stats->stop says why), or an error of the potential
 * other than a failed single structure (ND_EDOMAIN, ND_ENOMEM, and
 * ND_EEXTERNAL before any candidate has succeeded): those stop the search.
 * A structure on which the potential fails with ND_ECOMPUTE (or
 * ND_EEXTERNAL once the program has worked) is counted in stats->failed. */
int nd_search_step(nd_search *s, nd_error *err);

/* Verifies and ranks (see above). Call once after nd_search_step returned
 * ND_OK. ND_OK, ND_ECOMPUTE when no minimum survived, or an error. */
int nd_search_finish(nd_search *s, nd_error *err);

const nd_search_counts *nd_search_stats(const nd_search *s);

/* Reported conformers in rank order (after nd_search_finish). */
int nd_search_count(const nd_search *s);
const nd_conformer *nd_search_conformer(const nd_search *s, int rank);

/* The minima found by the sampling so far, in order of discovery (for
 * tests and progress): count, and coordinates / energy of minimum i. */
int nd_search_minima(const nd_search *s);
const double *nd_search_minimum(const nd_search *s, int i, double *energy);

/* The first structure (3n), as embedded or read. */
const double *nd_search_start(const nd_search *s);

/* The molecule searched (with the stereo it keeps), owned by s. */
const nd_molecule *nd_search_molecule(const nd_search *s);

void nd_search_free(nd_search *s);

#endif

/* Evaluating a model against reference energies and forces: the figures a
 * chemist needs to trust a potential for conformer ranking.
 *
 * Every structure is predicted through the public path (nd_potential, the
 * ensemble mean, with per-member results for the spread). Figures, all in
 * kcal/mol and kcal/mol/angstrom:
 *  - energy MAE and RMSE per structure and per atom (error / atom count);
 *  - relative-energy MAE within each molecule: energies measured from the
 *    molecule's lowest reference structure, over the other structures of
 *    molecules with at least two (what conformer ranking needs);
 *  - per-molecule Spearman rank correlation (C. Spearman, Am. J. Psychol.
 *    15, 72, 1904; ties get their average rank) of predicted against
 *    reference energies, for molecules with at least three structures:
 *    median, quartiles, extremes;
 *  - force-component MAE and RMSE, overall and per element;
 *  - for ensembles (K >= 2): how the spread (sample standard deviation of
 *    the members, as in ensemble.h) tracks the error of the mean: Spearman
 *    correlation of spread against |error| for energies and per-atom forces
 *    (error: length of the force error vector; spread: ensemble.h's
 *    per-atom force spread), and the fraction of errors within one and two
 *    spreads. */
#ifndef ND_EVALUATE_H
#define ND_EVALUATE_H

#include "core/status.h"
#include "potential/dataset.h"
#include "potential/model.h"

#define ND_EVALUATE_MAX_ELEMENTS 16

typedef struct nd_evaluation {
    long structures, atoms;
    int molecules;
    double energy_mae, energy_rmse;           /* per structure */
    double energy_atom_mae, energy_atom_rmse; /* per atom */
    long relative_count;                      /* structures in the relative MAE */
    double relative_mae;                      /* NaN if relative_count is 0 */
    int rank_molecules;                       /* molecules with >= 3 structures */
    double rank_median, rank_q1, rank_q3, rank_min, rank_max; /* NaN if none */
    long force_components;                    /* with reference forces */
    double force_mae, force_rmse;
    int nelements;                            /* elements seen, ascending atomic number */
    int z[ND_EVALUATE_MAX_ELEMENTS];
    long element_components[ND_EVALUATE_MAX_ELEMENTS];
    double element_force_mae[ND_EVALUATE_MAX_ELEMENTS], element_force_rmse[ND_EVALUATE_MAX_ELEMENTS];
    int members;
    /* ensembles only (NaN when K = 1) */
    double energy_spread_mean;                /* mean spread of the energies */
    double energy_spread_rank;                /* Spearman(spread, |error|) over structures */
    double energy_within1, energy_within2;    /* fraction with |error| <= 1, 2 spreads */
    double force_spread_mean;                 /* mean per-atom force spread */
    double force_spread_rank;                 /* Spearman(spread, |error|) over atoms */
    double force_within1, force_within2;
} nd_evaluation;

/* Evaluates model on every structure of data. ND_EDOMAIN naming the
 * structure (1-based) for an element or charge outside the model;
 * ND_ECOMPUTE if a prediction fails; ND_ENOMEM. */
int nd_evaluate_dataset(const nd_model *model, const nd_dataset *data, nd_evaluation *out,
                        nd_error *err);

/* Spearman rank correlation of n pairs (average ranks for ties): the
 * Pearson correlation of the ranks. NaN when n < 2 or either side is
 * constant. */
double nd_evaluate_spearman(int n, const double *a, const double *b);

#endif

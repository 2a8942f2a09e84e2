/* Ensemble uncertainty: the spread between the members of a model for
 * energies, for energy differences between structures (conformers), and for
 * forces. Members share the descriptor; their per-member results come from
 * nd_potential_compute (member_energy, member_grad).
 *
 * The spread is the sample standard deviation over the K members (divisor
 * K - 1; 0 when K = 1). */
#ifndef ND_ENSEMBLE_H
#define ND_ENSEMBLE_H

#include "core/status.h"
#include "potential/potential.h"

/* Mean and spread of K values v (either output may be NULL). Summed in
 * member order. */
void nd_ensemble_stats(int K, const double *v, double *mean, double *spread);

/* Spread of the member-wise difference a_k - b_k (for example the energies
 * of two conformers under each member): the uncertainty of a relative
 * energy, smaller than either energy's own spread when members agree on
 * the shift. Mean difference to *mean if not NULL. */
double nd_ensemble_difference_spread(int K, const double *a, const double *b, double *mean);

/* Per-member energies of m structures (e: m * K, structure-major) and, if g
 * is not NULL, per-member gradients (m * K * 3n). Uses p's atoms; p's mode
 * does not matter. */
int nd_ensemble_members(nd_potential *p, int m, const double *x, double *e, double *g,
                        nd_error *err);

/* Energy spread of one structure and the largest per-atom spread of the
 * force (root of the summed per-component sample variances, kcal/mol/A).
 * K gradients of 3n values are read from member_grad (member-major). */
double nd_ensemble_force_spread(int K, int n, const double *member_grad);

#endif

/* Ranking conformers: relative energies, Boltzmann weights, energy window,
 * and the uncertainty of relative energies from ensemble members. */
#ifndef ND_RANK_H
#define ND_RANK_H

#include "core/status.h"

/* Sorts n conformers by key (kcal/mol; energy or free energy), ascending;
 * ties broken by index so the order is deterministic. order receives the
 * indices. */
void nd_rank_order(int n, const double *key, int *order);

/* Boltzmann weights at temperature t (K) of n states with energies e
 * (kcal/mol): w_k = exp(-(e_k - e_min) / (R t)) / sum, computed relative to
 * the minimum so no exponent overflows. t <= 0 puts all weight on the
 * lowest state (ties share it). Returns ND_EINVAL for n < 1 or a non-finite
 * energy. */
int nd_rank_boltzmann(int n, const double *e, double t, double *w, nd_error *err);

/* Ensemble spread of relative energies. member_e is n * k (k members, row
 * per conformer: member_e[i * k + j]); ref is the reference conformer (the
 * lowest). sigma[i] is the sample standard deviation over members of
 * (E_ij - E_ref,j), zero for the reference itself and when k < 2. Because
 * the members' errors are correlated across conformers of one molecule,
 * this is smaller than the spread of absolute energies. */
void nd_rank_relative_spread(int n, int k, const double *member_e, int ref, double *sigma);

/* Indices (in rank order) of the conformers to keep: relative key within
 * window kcal/mol of the lowest (window < 0: no limit) and at most max_count
 * of them (max_count < 1: no limit). Writes them to keep and returns how
 * many. */
int nd_rank_select(int n, const double *key, double window, int max_count, int *keep);

#endif

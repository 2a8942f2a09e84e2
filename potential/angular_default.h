/* Module-internal: the angular symmetry functions of descriptor.h for our
 * default sets (nd_descriptor_defaults: zeta 1, 1, 4, 4, 2; lambda +1, -1,
 * +1, -1, +1; the first four sharing one eta), with loops the compiler
 * vectorises.
 *
 * The neighbours inside the angular cutoff are kept struct-of-arrays,
 * grouped by element. For each neighbour a, one loop runs over every later
 * neighbour b, whatever its element: the per-pair weights of the element
 * pair (z_a, z_b) come from arrays indexed by b, and the sums that belong to
 * b (its share of the features, of the gradient) go to arrays indexed by b.
 * The same sums as the general pair loops of descriptor.c, in another
 * order (so equal to rounding). */
#ifndef ND_ANGULAR_DEFAULT_H
#define ND_ANGULAR_DEFAULT_H

#include "potential/descriptor.h"

#include <stddef.h>

/* Index of the unordered element pair (a, b) among nel elements: the order
 * of the angular feature blocks, shared by the general loops of
 * descriptor.c and the kernels here. */
static inline int nd_angular_pair_index(int a, int b, int nel)
{
    if (a > b) {
        int t = a;
        a = b;
        b = t;
    }
    return a * nel - a * (a - 1) / 2 + (b - a);
}

/* Whether p's angular sets are exactly the default ones above. */
int nd_angular_is_default(const nd_descriptor_params *p);

/* Scratch doubles of the two calls below for up to maxnn neighbours and nel
 * elements. */
size_t nd_angular_default_scratch(int nel, int maxnn);

/* Adds the angular features of atom i to GA (the angular part of G, which
 * the caller has zeroed). Arguments as for nd_descriptor_atom; scratch as
 * sized above, iscratch nn ints. */
void nd_angular_default_features(const nd_descriptor_params *p, int nel, const double *x,
                                 const int *species, int i, const int *nbr, int nn, double *GA,
                                 double *scratch, int *iscratch);

/* nd_angular_default_features that keeps its set-up in kept and rows
 * (room for ND_DESC_KEPT_ROWS * nn doubles) for nd_angular_default_grad_kept. */
void nd_angular_default_features_keep(const nd_descriptor_params *p, int nel, const double *x,
                                      const int *species, int i, const int *nbr, int nn,
                                      double *GA, double *scratch, int *iscratch,
                                      nd_angular_kept *kept, double *rows);

/* nd_angular_default_grad from a kept set-up (same bits). */
void nd_angular_default_grad_kept(const nd_descriptor_params *p, int nel, const double *x,
                                  const int *species, int i, const int *nbr, int nn,
                                  const double *UA, double *gj, double *scratch, int *iscratch,
                                  const nd_angular_kept *kept, const double *rows);

/* Adds d(UA . GA_i)/dx_j to gj (3 per neighbour, nbr order) for the angular
 * weights UA (the angular part of u = dE/dG_i). The centre's own term is
 * minus their sum, which the caller forms. */
void nd_angular_default_grad(const nd_descriptor_params *p, int nel, const double *x,
                             const int *species, int i, const int *nbr, int nn, const double *UA,
                             double *gj, double *scratch, int *iscratch);

#endif

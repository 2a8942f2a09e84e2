/* Directional derivatives of the symmetry functions (module-internal, used
 * by the trainer's exact force-loss gradient; see POTENTIAL.md).
 *
 * For atom i and a displacement field r (3 numbers per atom), the tangent
 *     v_i = sum_k J_ik r_k,   J_ik = dG_i/dx_k  (D x 3),
 * is the rate of change of atom i's features when every atom k moves along
 * r_k. Since G_i depends only on the vectors x_j - x_i, this is
 *     v_i = sum_{j in nbr} (dG_i/dx_j) (r_j - r_i),
 * computed in one pass over the pairs and triplets of i, without forming J.
 * The definitions and feature layout are those of descriptor.h. */
#ifndef ND_DESCRIPTOR_TANGENT_H
#define ND_DESCRIPTOR_TANGENT_H

#include "potential/descriptor.h"

#include <stddef.h>

/* Scratch doubles for an atom with up to maxnn neighbours (a little more
 * than nd_descriptor_scratch_doubles, which it also covers). */
size_t nd_descriptor_tangent_scratch_doubles(const nd_descriptor_params *p, int maxnn);

/* Writes v_i (D values, overwritten) for atom i along the displacement r
 * (indexed like x). Other arguments as for nd_descriptor_atom, with scratch
 * sized by nd_descriptor_tangent_scratch_doubles and maxnn ints. */
void nd_descriptor_atom_tangent(const nd_descriptor_params *p, int nel, const double *x,
                                const int *species, int i, const int *nbr, int nn, const double *r,
                                double *v, double *dscratch, int *iscratch);

#endif

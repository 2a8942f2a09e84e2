/* Forward-mode tangents through one member's network of one element, and
 * the reverse pass through both the primal and the tangent (module-internal,
 * used by the trainer). This is how the trainer gets the exact weight
 * gradient of a force loss (POTENTIAL.md, "The exact gradient of a force
 * loss").
 *
 * For each input row (an atom) with scaled input a_0 and tangent
 * adot_0 = scale * v (v: the descriptor tangent of the atom), the forward
 * pass computes, layer by layer (network.h's notation, silu activation):
 *   z_l = W_l a_{l-1} + b_l,  a_l = silu(z_l)
 *   zdot_l = W_l adot_{l-1},  adot_l = silu'(z_l) zdot_l
 *   E = w . a_L + b,          T = w . adot_L     (T = u . v, u = dE/dG)
 * and the reverse pass adds to a gradient buffer the derivative of
 *   sum_rows (cE_r E_r + cT_r T_r)
 * with respect to the member's weights and biases of that element.
 *
 * Gradient buffer layout ("member block", nd_net_tangent_block_doubles):
 * for l = 1 .. nhidden+1, W_l (width[l] x width[l-1], row-major) then
 * b_l (width[l]); the same order as one member's slices of network.h. */
#ifndef ND_NET_TANGENT_H
#define ND_NET_TANGENT_H

#include "potential/network.h"

#include <stddef.h>

/* Doubles in one member's block of one element (layout above). */
size_t nd_net_tangent_block_doubles(const struct nd_model *m);

/* Offsets of W_l and b_l inside the member block, l = 1 .. nhidden+1. */
size_t nd_net_tangent_w_offset(const struct nd_model *m, int l);
size_t nd_net_tangent_b_offset(const struct nd_model *m, int l);

/* Working memory (doubles) for rows input rows. */
size_t nd_net_tangent_work_doubles(const struct nd_model *m, int rows);

/* Primal and tangent forward pass of member k of element e over rows rows
 * of a0 (rows x D). ad0 (rows x D) is the tangent input, or NULL for the
 * primal only (then T is not written and may be NULL). Writes E (rows,
 * without the element offset) and T (rows) and keeps what the reverse pass
 * needs in work. */
void nd_net_tangent_forward(const struct nd_model *m, int e, int k, int rows, const double *a0,
                            const double *ad0, double *work, double *E, double *T);

/* The same forward pass in two steps, so that the tangent input can depend
 * on the primal results (the trainer's tangent is built from force
 * residuals, which need U): nd_net_tangent_primal computes E and keeps
 * the activations; nd_net_tangent_input_grad then gives
 * U = dE/dG (rows x D, the input scaling included, as nd_net_backward);
 * nd_net_tangent_push adds the tangent pass for ad0 and writes T. After
 * primal (+ push), nd_net_tangent_reverse may follow as after
 * nd_net_tangent_forward (with ad0 NULL when push was not called).
 * Several calls for different elements may use disjoint slices of one
 * buffer: nd_net_tangent_work_doubles is linear in rows. */
void nd_net_tangent_primal(const struct nd_model *m, int e, int k, int rows, const double *a0,
                           double *work, double *E);
void nd_net_tangent_input_grad(const struct nd_model *m, int e, int k, int rows, double *work,
                               double *U);
void nd_net_tangent_push(const struct nd_model *m, int e, int k, int rows, const double *ad0,
                         double *work, double *T);

/* Reverse pass after nd_net_tangent_forward with the same m, e, k, rows,
 * a0, ad0 and work: adds d(sum_r cE[r] E_r + cT[r] T_r)/dtheta to grad
 * (a member block). cT is ignored when ad0 is NULL. work is clobbered. */
void nd_net_tangent_reverse(const struct nd_model *m, int e, int k, int rows, const double *a0,
                            const double *ad0, const double *cE, const double *cT, double *work,
                            double *grad);

#endif

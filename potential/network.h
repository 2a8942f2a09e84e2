/* Module-internal: the model struct and the per-element networks.
 * Used by model.c (files), potential.c (evaluation) and the trainer; not
 * part of nadir.h (outside users see nd_model as an opaque handle).
 *
 * Network of element e, member k (all elements share one architecture):
 *   a_0 = scale_e * (G - mu_e)                (per feature, stored per element)
 *   z_l = W_l a_{l-1} + b_l,  a_l = silu(z_l)  for l = 1 .. nhidden
 *   E   = w . a_L + b                          (output layer, l = nhidden + 1)
 * Atomic energy of atom i: E_i + offset[e_i].
 * silu(z) = z / (1 + exp(-z)) (smooth, with continuous derivatives of every
 * order; S. Elfwing et al., Neural Networks 107, 3, 2018).
 *
 * Parameter vector (params, nparams doubles; the order of the model file):
 *   mu      nel x D
 *   scale   nel x D
 *   offset  nel
 *   then per element e (block of elem_stride doubles, at net + e*elem_stride),
 *   per layer l = 1 .. nhidden+1:
 *     W_l  all members stacked: nmembers x width[l] x width[l-1], row-major
 *          (member k's matrix at w_off[l] + k*width[l]*width[l-1])
 *     b_l  nmembers x width[l]
 * Stacking the members' first layers makes one tall matrix, so the first
 * layer of every member is one dgemm. */
#ifndef ND_NETWORK_H
#define ND_NETWORK_H

#include "core/elements.h"
#include "potential/descriptor.h"

#include <stddef.h>

#define ND_MODEL_MAX_ELEMENTS ND_DESC_MAX_ELEMENTS
#define ND_NET_MAX_HIDDEN 6
#define ND_NET_MAX_WIDTH 4096
#define ND_MODEL_MAX_MEMBERS 64

struct nd_model {
    int nel;                          /* elements covered */
    int z[ND_MODEL_MAX_ELEMENTS];     /* their atomic numbers, ascending */
    int slot_of_z[ND_MAX_Z + 1];      /* element slot of an atomic number, -1 if not covered */
    nd_descriptor_params desc;
    int D;                            /* descriptor size */
    int nhidden;                      /* hidden layers, >= 1 */
    int width[ND_NET_MAX_HIDDEN + 2]; /* width[0] = D, width[nhidden + 1] = 1 */
    int nmembers;                     /* ensemble members, >= 1 */
    int neutral_only;                 /* 1: only molecules of total charge 0 */
    size_t nparams;
    double *params;                   /* owned, layout above */
    double *mu, *scale, *offset;      /* views into params */
    double *net;                      /* first element block */
    size_t elem_stride;               /* doubles per element block */
    size_t w_off[ND_NET_MAX_HIDDEN + 2], b_off[ND_NET_MAX_HIDDEN + 2]; /* within a block, l >= 1 */
    char *provenance;                 /* JSON object text, owned, never NULL */
};

/* Weights of layer l (1 .. nhidden+1) of member k of element e. */
static inline double *nd_net_weights(const struct nd_model *m, int e, int l, int k)
{
    return m->net + (size_t)e * m->elem_stride + m->w_off[l] +
           (size_t)k * (size_t)m->width[l] * (size_t)m->width[l - 1];
}
static inline double *nd_net_bias(const struct nd_model *m, int e, int l, int k)
{
    return m->net + (size_t)e * m->elem_stride + m->b_off[l] + (size_t)k * (size_t)m->width[l];
}

/* Fills the derived fields (D, width[0], offsets, nparams) from nel, desc,
 * nhidden, width[1..], nmembers. Returns nparams. */
size_t nd_net_layout(struct nd_model *m);

/* Points mu, scale, offset and net into params. */
void nd_net_bind(struct nd_model *m);

/* Working memory (doubles) of a forward + backward pass over rows atoms and
 * nk members. Layout, for l = 1 .. nhidden, with n_l = nk * width[l]:
 *   a_l  rows x n_l    activations, member k's columns at k*width[l]
 *   s_l  rows x n_l    silu'(z_l)
 * then two rows x max(n_l) buffers for the backward pass. */
size_t nd_net_work_doubles(const struct nd_model *m, int rows, int nk);

/* a0 = scale_e * (G - mu_e) for rows rows of D features (in place allowed). */
void nd_net_input(const struct nd_model *m, int e, int rows, const double *G, double *a0);

/* Forward pass of members k0 .. k1-1 of element e over rows inputs a0
 * (rows x D). Writes atomic energies (without offset) to E (rows x (k1-k0),
 * row-major) and keeps what the backward pass needs in work. */
void nd_net_forward(const struct nd_model *m, int e, int k0, int k1, int rows, const double *a0,
                    double *work, double *E);

/* Backward pass after nd_net_forward with the same arguments: writes
 * U = d(coef * sum_k E_k)/dG (rows x D), the input scaling included. */
void nd_net_backward(const struct nd_model *m, int e, int k0, int k1, int rows, double coef,
                     double *work, double *U);

/* Layer 1 of every member of element e with the input scaling folded in:
 * W1 (nmembers * width[1] x D, members stacked as in the model) = W_1
 * scale_e per column, and b1 (nmembers * width[1]) = b_1 - W1 mu_e, so
 * that W1 G + b1 = W_1 (scale_e (G - mu_e)) + b_1 to rounding. For the
 * evaluation of a fixed model: no scaling pass over the inputs per call,
 * and none over U. */
void nd_net_fold_input(const struct nd_model *m, int e, double *W1, double *b1);

/* nd_net_forward and nd_net_backward on raw features G (rows x D) with the
 * folded layer 1 of nd_net_fold_input, offset to member k0 (W1 + k0 *
 * width[1] * D, b1 + k0 * width[1]). */
void nd_net_forward_folded(const struct nd_model *m, int e, int k0, int k1, int rows,
                           const double *G, const double *W1, const double *b1, double *work,
                           double *E);
void nd_net_backward_folded(const struct nd_model *m, int e, int k0, int k1, int rows, double coef,
                            const double *W1, double *work, double *U);

/* silu and its first two derivatives (for tests and the trainer). */
double nd_net_silu(double z, double *d1, double *d2);

#endif

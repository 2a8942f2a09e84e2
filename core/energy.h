/* The energy function: the one seam that minimisers, the Hessian and the
 * conformer search cross. Every potential (learned, ensemble, external,
 * analytic test potentials) is reached through it. */
#ifndef ND_ENERGY_H
#define ND_ENERGY_H

/* Energy of n atoms at x (3n, angstrom) in kcal/mol; gradient g (3n,
 * kcal/mol/angstrom) or NULL when only the energy is wanted. Returns ND_OK
 * or an nd_status error code. Implementations must be safe to call from
 * several threads at once with the same ctx (keep scratch memory per call
 * or per thread), and must report non-finite results as ND_ECOMPUTE. */
typedef int (*nd_energy_fn)(void *ctx, int n, const double *x, double *energy, double *g);

/* Energies of m structures of the same n atoms: x is m * 3n, energy m, g
 * m * 3n or NULL. Lets a potential evaluate many structures as one large
 * matrix product. */
typedef int (*nd_energy_batch_fn)(void *ctx, int n, int m, const double *x, double *energy,
                                  double *g);

/* A potential as the algorithms see it. batch may be NULL, in which case
 * nd_energy_batch calls fn once per structure (in parallel). */
typedef struct nd_energy {
    nd_energy_fn fn;
    nd_energy_batch_fn batch;
    void *ctx;
} nd_energy;

/* Evaluates m structures through pot->batch, or through pot->fn in an
 * OpenMP loop when there is no batch call. Returns the error of the lowest-index structure that failed. */
int nd_energy_batch(const nd_energy *pot, int n, int m, const double *x, double *energy, double *g);

#endif

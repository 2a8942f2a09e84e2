/* A model Hessian from the geometry's connectivity, used as the initial
 * inverse Hessian of L-BFGS so stiff bond stretches and softer bends and
 * torsions are scaled apart from the first step on.
 *
 * Model: R. Lindh, A. Bernhardsson, G. Karlstrom and P.-A. Malmqvist,
 * "On the use of a Hessian model function in molecular geometry
 * optimizations", Chem. Phys. Lett. 241, 423 (1995): force constants for
 * every stretch, bend and torsion weighted by a distance-decaying
 * connectivity rho_ij = exp(alpha_ij (r_ref,ij^2 - r_ij^2)), so bonded
 * atoms couple strongly and distant ones not at all. H = sum_q k_q b_q b_q^T
 * (b_q the Wilson B-matrix row of coordinate q) is positive semidefinite; a
 * small multiple of the identity makes it definite, and its Cholesky factor
 * is kept for solves. */
#ifndef ND_PRECONDITION_H
#define ND_PRECONDITION_H

#include "core/status.h"

typedef struct nd_precond nd_precond;

/* Builds the model Hessian of n atoms with atomic numbers z (1..54) at x
 * (3n, angstrom). frozen (n flags, may be NULL) marks atoms that do not
 * move: their rows and columns are decoupled (identity block), so a solve
 * keeps a zero gradient component zero. stabilise is the multiple of the
 * identity added, kcal/mol/A^2 (<= 0: the default, 1.0). Returns ND_OK and
 * *out (free with nd_precond_free); ND_EINVAL, ND_ENOMEM, or ND_ECOMPUTE
 * if the factorisation fails. */
int nd_precond_new(nd_precond **out, int n, const int *z, const double *x,
                   const unsigned char *frozen, double stabilise, nd_error *err);

/* Rebuilds the model at new coordinates x (same atoms). */
int nd_precond_update(nd_precond *p, const double *x, nd_error *err);

/* out = H^-1 v for a vector v of 3n components (out may equal v). */
void nd_precond_solve(const nd_precond *p, const double *v, double *out);

/* out = H v (for tests and scaling). */
void nd_precond_multiply(const nd_precond *p, const double *v, double *out);

/* Number of atoms the model was built for. */
int nd_precond_atoms(const nd_precond *p);

/* Frees p; accepts NULL. */
void nd_precond_free(nd_precond *p);

#endif

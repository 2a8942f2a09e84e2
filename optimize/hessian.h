/* The Hessian of a potential by central finite differences of its analytic
 * gradient. Every displaced structure goes through nd_energy_batch, so a
 * potential with a batch call sees them as large batches and one without is
 * evaluated in parallel structure by structure. */
#ifndef ND_HESSIAN_H
#define ND_HESSIAN_H

#include "core/energy.h"
#include "core/status.h"

#include <stddef.h>

/* Default displacement, angstrom. Central differences of the gradient have a
 * truncation error of (h^2 / 6) d^4E/dx^4 in each element and a rounding
 * error of about eps_g / h, where eps_g is the absolute noise of the model's
 * gradient. For a stiff X-H stretch (Morse a ~ 2 / angstrom) h = 0.005 gives
 * a relative force-constant error near 1e-4 (a few 0.1 cm^-1 at 3000 cm^-1),
 * while gradient noise of 1e-9 kcal/mol/angstrom contributes only 2e-7
 * kcal/mol/angstrom^2. The pair balances the two for double-precision model
 * forces with some margin for noisier (single-precision) potentials. */
#define ND_HESSIAN_STEP_DEFAULT 0.005

/* Default cap of the workspace, doubles (64 MB): by default all 6 N
 * displaced structures go to the potential in one batch call unless their
 * coordinates and gradients would need more than this (above ~1150 atoms),
 * in which case they go in as many batches as needed. */
#define ND_HESSIAN_WORK_MAX 8.0e6

typedef struct nd_hessian_opts {
    double step; /* displacement h, angstrom; 0 selects ND_HESSIAN_STEP_DEFAULT */
    int batch;   /* displaced structures per nd_energy_batch call; 0 = all 6 N at once
                    (within ND_HESSIAN_WORK_MAX) */
} nd_hessian_opts;

/* Diagnostics of one Hessian. */
typedef struct nd_hessian_info {
    int nfree;          /* atoms that were displaced (not frozen) */
    int ncalls;         /* structures evaluated (6 nfree, + 1 with a reference gradient) */
    double step;        /* displacement used, angstrom */
    double asymmetry;   /* max |H_ij - H_ji| before symmetrising, kcal/mol/angstrom^2 */
} nd_hessian_info;

/* Number of free atoms: those with frozen[i] == 0 (all n when frozen is NULL). */
int nd_hessian_count_free(int n, const int *frozen);

/* Size in doubles of the workspace nd_hessian_compute needs for n atoms of
 * which nfree are free, with the given options (NULL = defaults). */
size_t nd_hessian_work_size(int n, int nfree, const nd_hessian_opts *opts);

/* Computes the (partial) Hessian of pot at x (3 n, angstrom).
 *
 * Rows and columns are the Cartesian coordinates of the free atoms in atom
 * order (frozen[i] != 0 marks atom i frozen; NULL = all free), so h is
 * (3 nfree) x (3 nfree), row-major, kcal/mol/angstrom^2, and symmetric:
 * H = (A + A^T) / 2 of the raw difference matrix A, whose largest asymmetry
 * is reported in info. Row j of A is [g(x + h e_j) - g(x - h e_j)] / (2 h)
 * restricted to free coordinates; error O(h^2).
 *
 * work holds nd_hessian_work_size() doubles, or is NULL to allocate it here
 * for this call. g0 (3 n) receives the gradient at x when not NULL (one more
 * evaluation). info may be NULL. Returns ND_OK, ND_EINVAL for bad sizes or a
 * step <= 0, ND_ENOMEM, ND_ECOMPUTE for non-finite gradients, or the
 * potential's error (of the lowest-index failing structure). */
int nd_hessian_compute(const nd_energy *pot, int n, const double *x, const int *frozen,
                       const nd_hessian_opts *opts, double *work, double *h, double *g0,
                       nd_hessian_info *info, nd_error *err);

#endif

/* Behler-Parrinello atom-centred symmetry functions (J. Behler and
 * M. Parrinello, Phys. Rev. Lett. 98, 146401, 2007; J. Behler, J. Chem.
 * Phys. 134, 074106, 2011), with analytic derivatives.
 *
 * For a centre atom i with neighbours j, k (r_ij = |x_j - x_i|):
 *
 *   radial,  per neighbour element Z and Gaussian m:
 *     G[Z, m] = sum_{j in Z} exp(-eta_m (r_ij - s_m)^2) fc_r(r_ij)
 *   angular, per unordered neighbour element pair (Z1 <= Z2) and set n:
 *     G[(Z1,Z2), n] = 2^(1 - zeta_n) sum_{j<k} (1 + lambda_n cos theta_ijk)^zeta_n
 *                     exp(-eta_n (r_ij^2 + r_ik^2)) fc_a(r_ij) fc_a(r_ik)
 *     (the "no r_jk" angular form, G5 in Behler 2011; zeta is a positive integer)
 *
 * Cutoff (ours, a quintic smoothstep): with t = r / rc,
 *     fc(r) = (1 - t)^3 (1 + 3t + 6t^2) = 1 - 10t^3 + 15t^4 - 6t^5   (r < rc), 0 beyond,
 * so fc, fc' and fc'' are all zero at rc (and fc = 1, fc' = fc'' = 0 at r = 0).
 *
 * Feature layout for a model of nel elements (element slots 0..nel-1 in the
 * model's order): first nel * nradial radial features (slot-major), then
 * npair * nangular angular features, pair (a <= b) numbered
 * a*nel - a*(a-1)/2 + (b - a). */
#ifndef ND_DESCRIPTOR_H
#define ND_DESCRIPTOR_H

#include "core/status.h"

#include <stddef.h>
#include <stdint.h>
#include <string.h>

#define ND_DESC_MAX_RADIAL 32
#define ND_DESC_MAX_ANGULAR 16
#define ND_DESC_MAX_ZETA 64
#define ND_DESC_MAX_ELEMENTS 16 /* = ND_MODEL_MAX_ELEMENTS */

/* Descriptor parameters: plain data, stored in the model file. */
typedef struct nd_descriptor_params {
    double radial_cutoff;                    /* angstrom */
    int nradial;                             /* Gaussians per neighbour element */
    double radial_eta[ND_DESC_MAX_RADIAL];   /* angstrom^-2 */
    double radial_shift[ND_DESC_MAX_RADIAL]; /* angstrom */
    double angular_cutoff;                   /* angstrom, <= radial_cutoff */
    int nangular;                            /* sets per neighbour element pair */
    double angular_eta[ND_DESC_MAX_ANGULAR]; /* angstrom^-2 */
    int angular_zeta[ND_DESC_MAX_ANGULAR];   /* 1 .. ND_DESC_MAX_ZETA */
    int angular_lambda[ND_DESC_MAX_ANGULAR]; /* +1 or -1 */
} nd_descriptor_params;

/* Fills p with our default set, meant for H, C, N, O, F, S, Cl:
 *  - radial cutoff 5.2 angstrom, 10 Gaussians with centres evenly spaced
 *    from 0.8 to 4.7 angstrom (spacing d = 0.4333) and eta = 4 ln 2 / d^2,
 *    so neighbouring Gaussians cross at half height;
 *  - angular cutoff 3.5 angstrom (first and second neighbour shells of
 *    organic molecules; the low end of POTENTIAL.md's 3.5 to 4.5, because
 *    the angular terms grow with the square of the neighbour count and
 *    dominate the cost at liquid density), 5 sets (eta, zeta, lambda): (0.05, 1, +1),
 *    (0.05, 1, -1), (0.05, 4, +1), (0.05, 4, -1), (0.4, 2, +1).
 * For 7 elements that is 70 radial + 28 * 5 = 140 angular = 210 features,
 * inside the budget of POTENTIAL.md. Our own choice (common practice, no
 * source); to be tuned by training. */
void nd_descriptor_defaults(nd_descriptor_params *p);

/* Checks p (counts in range, cutoffs positive, angular cutoff no larger than
 * the radial one, finite positive widths, zeta and lambda valid). ND_EINPUT
 * naming the first bad parameter. */
int nd_descriptor_check(const nd_descriptor_params *p, nd_error *err);

/* Whether a and b hold the same cutoffs and functions (compared member by
 * member, unused slots ignored). */
int nd_descriptor_equal(const nd_descriptor_params *a, const nd_descriptor_params *b);

/* Number of features for a model of nel elements. */
int nd_descriptor_size(const nd_descriptor_params *p, int nel);

/* The cutoff function fc(r) above for cutoff rc; writes fc' and fc'' to d1
 * and d2 when they are not NULL. Zero (with zero derivatives) for r >= rc. */
double nd_descriptor_cutoff(double r, double rc, double *d1, double *d2);

/* ---- module-internal: used by potential.c and the trainer ---- */

/* exp(x) for x <= 709, written so that the compiler can vectorise loops
 * that call it (no branches, no library call): x = k ln 2 + f with k the
 * nearest integer to x / ln 2 (|f| <= ln 2 / 2, ln 2 split in two parts so
 * that f is exact to a few ulps), exp(f) by its Taylor series to degree 13
 * (truncation below 2e-17 relative), times 2^k built in the exponent bits.
 * Within 1 ulp of the C library's exp on a dense grid of [-708, 709]
 * (test_descriptor); 0 below -708 (where the true value is below
 * 3.3e-308). It is a fixed sequence of plain IEEE operations (C11 mode
 * fuses no multiply-add), so the scalar and vector versions of a loop give
 * the same bits, whatever the thread count. Files that want
 * loops with it vectorised compile with -fno-trapping-math (a pragma):
 * otherwise GCC may not turn the two comparisons into selects. */
static inline double nd_exp(double x)
{
    const double shifter = 0x1.8p52, log2e = 0x1.71547652b82fep0;
    const double ln2hi = 0x1.62e42fefa3800p-1, ln2lo = 0x1.ef35793c76730p-45;
    double xc = x < -708.0 ? -708.0 : x;
    double kd = xc * log2e + shifter; /* k + 1.5 2^52: k in the low mantissa bits */
    uint64_t kb;
    memcpy(&kb, &kd, sizeof kb);
    double k = kd - shifter;
    double f = (xc - k * ln2hi) - k * ln2lo;
    double q = 1.0 / 6227020800.0;
    q = q * f + 1.0 / 479001600.0;
    q = q * f + 1.0 / 39916800.0;
    q = q * f + 1.0 / 3628800.0;
    q = q * f + 1.0 / 362880.0;
    q = q * f + 1.0 / 40320.0;
    q = q * f + 1.0 / 5040.0;
    q = q * f + 1.0 / 720.0;
    q = q * f + 1.0 / 120.0;
    q = q * f + 1.0 / 24.0;
    q = q * f + 1.0 / 6.0;
    q = q * f + 0.5;
    q = q * f + 1.0;
    q = q * f + 1.0;
    /* the low 52 bits of kb hold 2^51 + k: (kb - 2^51 + 1023) << 52 is 2^k */
    uint64_t sb = (kb - 0x8000000000000ull + 1023u) << 52;
    double s;
    memcpy(&s, &sb, sizeof s);
    double y = q * s;
    return x >= -708.0 ? y : 0.0;
}


/* Scratch needed by the per-atom calls (nd_descriptor_atom, _grad,
 * _grad_shared, _tangent) for an atom with up to maxnn neighbours, for a
 * model of nel elements: doubles (and maxnn ints). */
size_t nd_descriptor_scratch_doubles(const nd_descriptor_params *p, int nel, int maxnn);

/* Features of atom i. x: coordinates (3 per atom, the same indexing as
 * species and nbr), species: element slot per atom, nbr: the nn neighbours
 * of i within the radial cutoff (any order, no i). G (size D) is
 * overwritten. dscratch and iscratch as sized above (iscratch: maxnn ints). */
void nd_descriptor_atom(const nd_descriptor_params *p, int nel, const double *x, const int *species,
                        int i, const int *nbr, int nn, double *G, double *dscratch, int *iscratch);

/* Contracts the feature derivatives of atom i with u = dE/dG_i (size D):
 * gi (3) receives d(u.G_i)/dx_i and gj (3 * nn) receives d(u.G_i)/dx_j for
 * each neighbour in nbr order. Both are overwritten. Same arguments as
 * nd_descriptor_atom otherwise. */
void nd_descriptor_atom_grad(const nd_descriptor_params *p, int nel, const double *x,
                             const int *species, int i, const int *nbr, int nn, const double *u,
                             double *gi, double *gj, double *dscratch, int *iscratch);

/* The same contraction for all atoms at once, as potential.c uses it: U
 * holds dE/dG of every atom (atom a in row row[a], D columns). The radial
 * term of each pair (i, j), for both centres, is done by the call for the
 * lower index from one set of Gaussians, so the sum over all atoms of gi
 * and gj equals that of nd_descriptor_atom_grad, with half the radial work;
 * the split between the two calls differs. */
void nd_descriptor_atom_grad_shared(const nd_descriptor_params *p, int nel, const double *x,
                                    const int *species, int i, const int *nbr, int nn,
                                    const double *U, const int *row, int D, double *gi,
                                    double *gj, double *dscratch, int *iscratch);

/* The angular set-up of one centre (its neighbours inside the angular
 * cutoff: distances, unit vectors, cutoff-weighted exponentials), kept by
 * the feature pass for the gradient pass at the same coordinates. Only for
 * the default angular sets (nd_angular_is_default); cnt < 0: nothing kept.
 * Its rows, ND_DESC_KEPT_ROWS * max(cnt, 1) doubles, live in a buffer the
 * caller owns. */
#define ND_DESC_KEPT_ROWS 9
typedef struct nd_angular_kept {
    int cnt, npresent;
    int block[ND_DESC_MAX_ELEMENTS + 1];
    int present[ND_DESC_MAX_ELEMENTS];
} nd_angular_kept;

/* nd_descriptor_atom that also keeps the angular set-up in kept and rows
 * (room for ND_DESC_KEPT_ROWS * nn doubles; kept->cnt says how many rows
 * of it are used, -1 when the sets are not the default ones). */
void nd_descriptor_atom_keep(const nd_descriptor_params *p, int nel, const double *x,
                             const int *species, int i, const int *nbr, int nn, double *G,
                             double *dscratch, int *iscratch, nd_angular_kept *kept, double *rows);

/* nd_descriptor_atom_grad_shared from the set-up kept by
 * nd_descriptor_atom_keep at the same coordinates (kept NULL or cnt < 0:
 * computed again). The same bits either way. */
void nd_descriptor_atom_grad_kept(const nd_descriptor_params *p, int nel, const double *x,
                                  const int *species, int i, const int *nbr, int nn,
                                  const double *U, const int *row, int D, double *gi, double *gj,
                                  double *dscratch, int *iscratch, const nd_angular_kept *kept,
                                  const double *rows);

/* Directional derivative of the features (used by the trainer's exact
 * force-loss gradient; see POTENTIAL.md): for atom i and a displacement
 * field r (3 numbers per atom, indexed like x), writes
 *     v_i = sum_k J_ik r_k,   J_ik = dG_i/dx_k  (D x 3),
 * the rate of change of atom i's features when every atom k moves along
 * r_k (D values, overwritten), without forming J. Other arguments as for
 * nd_descriptor_atom. */
void nd_descriptor_atom_tangent(const nd_descriptor_params *p, int nel, const double *x,
                                const int *species, int i, const int *nbr, int nn, const double *r,
                                double *v, double *dscratch, int *iscratch);

/* Scratch doubles nd_descriptor_atom_tangent needs for up to maxnn
 * neighbours, whatever the number of elements (at most
 * nd_descriptor_scratch_doubles, which also covers it). */
size_t nd_descriptor_tangent_scratch_doubles(const nd_descriptor_params *p, int maxnn);

#endif

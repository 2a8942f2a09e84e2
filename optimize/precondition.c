/* The Lindh model Hessian as a preconditioner (see precondition.h).
 *
 * R. Lindh et al., Chem. Phys. Lett. 241, 423 (1995): for atoms in periodic
 * rows a, b (1: H-He, 2: Li-Ne, 3: Na and beyond)
 *   rho_ij = exp(alpha_ab (r_ref,ab^2 - r_ij^2))             (r in bohr)
 *   stretch i-j      k = k_r rho_ij,                 k_r = 0.45
 *   bend i-j-k       k = k_phi rho_ij rho_jk,        k_phi = 0.15
 *   torsion i-j-k-l  k = k_tau rho_ij rho_jk rho_kl, k_tau = 0.005
 * in hartree/bohr^2 and hartree/rad^2, with the alpha and r_ref tables
 * below (values from memory of the paper's table; the preconditioner only
 * shapes steps, it never changes a minimum, so an error in them costs force
 * calls, not accuracy). H = sum_q k_q b_q b_q^T over all coordinates q with
 * weight above the cut-offs, b_q the gradient of q (coords.h). Converted to
 * kcal/mol/A^2 with CODATA 2018 constants (core/units.h).
 *
 * Cut-offs (chosen so a dropped term is below the stabilising diagonal):
 * stretches with rho < 1e-4 (k < 0.1 kcal/mol/A^2) are dropped; bends and
 * torsions are built only over pairs with rho > 0.03, which keeps bonded
 * neighbours and drops the rest; near-linear bends and torsions through
 * them, whose B-rows are undefined, are left to the diagonal.
 *
 * Cost: O(n^2) pairs plus the Cholesky factorisation of the 3n x 3n matrix,
 * (3n)^3 / 3 flops: about 1 ms for 50 atoms, and far below a force call of
 * a learned potential for drug-sized molecules. */
#include "optimize/precondition.h"

#include "core/units.h"
#include "optimize/coords.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

struct nd_precond {
    int n, n3;
    int *row;              /* periodic row class 0..2 per atom */
    unsigned char *frozen; /* n flags, or all zero */
    double stabilise;
    double *h;             /* model Hessian, 3n x 3n */
    double *l;             /* its Cholesky factor L (lower triangle, row-major), H = L L^T */
    double *rho;           /* n x n connectivity */
};

static const double LINDH_KR = 0.45, LINDH_KPHI = 0.15, LINDH_KTAU = 0.005;
static const double LINDH_ALPHA[3][3] = {{1.0000, 0.3949, 0.3949}, {0.3949, 0.2800, 0.2800},
                                         {0.3949, 0.2800, 0.2800}};
static const double LINDH_RREF[3][3] = {{1.35, 2.10, 2.53}, {2.10, 2.87, 3.40}, {2.53, 3.40, 3.40}};

static const double RHO_STRETCH_CUT = 1e-4, RHO_NEIGHBOUR_CUT = 0.03;
/* 1 kcal/mol/A^2: about the curvature of torsional and non-bonded motions,
 * so the steps along them are no longer than a plain L-BFGS step would be
 * (common practice for stabilising model Hessians, no source). */
static const double DEFAULT_STABILISE = 1.0;

static int row_of(int z)
{
    return z <= 2 ? 0 : z <= 10 ? 1 : 2;
}

/* Adds k b b^T for a coordinate touching `na` atoms listed in at[], whose
 * gradient b has 3 entries per atom. */
static void add_outer(nd_precond *p, int na, const int *at, const double *b, double k)
{
    int n3 = p->n3;
    for (int a = 0; a < na; a++)
        for (int c = 0; c < 3; c++) {
            int r = 3 * at[a] + c;
            double kb = k * b[3 * a + c];
            for (int a2 = 0; a2 < na; a2++)
                for (int c2 = 0; c2 < 3; c2++)
                    p->h[(size_t)r * n3 + 3 * at[a2] + c2] += kb * b[3 * a2 + c2];
        }
}

/* Cholesky factorisation H = L L^T (Golub & Van Loan, Matrix Computations,
 * 4th ed., Algorithm 4.2.1, in the row-oriented "dot product" form), in
 * plain loops rather than LAPACK so the result is the same bit for bit at
 * any BLAS thread count and safe inside the callers' parallel loops.
 * Returns 0, or the 1-based column whose pivot was not positive. */
static int cholesky(int n, const double *h, double *l)
{
    for (int j = 0; j < n; j++) {
        double *lj = l + (size_t)j * n;
        double d = h[(size_t)j * n + j];
        for (int k = 0; k < j; k++)
            d -= lj[k] * lj[k];
        if (!(d > 0))
            return j + 1;
        double piv = sqrt(d);
        lj[j] = piv;
        for (int k = j + 1; k < n; k++)
            lj[k] = 0;
        for (int i = j + 1; i < n; i++) {
            double *li = l + (size_t)i * n;
            double v = h[(size_t)i * n + j];
            for (int k = 0; k < j; k++)
                v -= li[k] * lj[k];
            li[j] = v / piv;
        }
    }
    return 0;
}

/* Builds H at x and factors it. */
static int build(nd_precond *p, const double *x, nd_error *err)
{
    int n = p->n, n3 = p->n3;
    const double to_bohr = 1.0 / ND_BOHR_ANGSTROM;
    const double k2 = ND_HARTREE_KCALMOL / (ND_BOHR_ANGSTROM * ND_BOHR_ANGSTROM); /* Eh/bohr^2 */
    const double k_ang = ND_HARTREE_KCALMOL;                                       /* Eh/rad^2 */
    memset(p->h, 0, (size_t)n3 * n3 * sizeof *p->h);
    for (int i = 0; i < n; i++) {
        p->rho[(size_t)i * n + i] = 0;
        for (int j = i + 1; j < n; j++) {
            double r = nd_coords_distance(x + 3 * i, x + 3 * j, NULL) * to_bohr;
            int a = p->row[i], b = p->row[j];
            double rr = LINDH_RREF[a][b];
            double rho = exp(LINDH_ALPHA[a][b] * (rr * rr - r * r));
            p->rho[(size_t)i * n + j] = p->rho[(size_t)j * n + i] = rho;
        }
    }
    double b[12];
    int at[4];
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double rho = p->rho[(size_t)i * n + j];
            if (rho < RHO_STRETCH_CUT)
                continue;
            nd_coords_distance(x + 3 * i, x + 3 * j, b);
            at[0] = i;
            at[1] = j;
            add_outer(p, 2, at, b, LINDH_KR * rho * k2);
        }
    for (int j = 0; j < n; j++)
        for (int i = 0; i < n; i++) {
            double rij = p->rho[(size_t)i * n + j];
            if (i == j || rij < RHO_NEIGHBOUR_CUT)
                continue;
            for (int k = i + 1; k < n; k++) {
                double rjk = p->rho[(size_t)j * n + k];
                if (k == j || rjk < RHO_NEIGHBOUR_CUT)
                    continue;
                int ok;
                nd_coords_angle(x + 3 * i, x + 3 * j, x + 3 * k, b, &ok);
                if (!ok || fabs(sin(nd_coords_angle(x + 3 * i, x + 3 * j, x + 3 * k, NULL, NULL))) < 0.1)
                    continue;
                at[0] = i;
                at[1] = j;
                at[2] = k;
                add_outer(p, 3, at, b, LINDH_KPHI * rij * rjk * k_ang);
            }
        }
    /* torsions i-j-k-l about each neighbour pair j < k */
    for (int j = 0; j < n; j++)
        for (int k = j + 1; k < n; k++) {
            double rjk = p->rho[(size_t)j * n + k];
            if (rjk < RHO_NEIGHBOUR_CUT)
                continue;
            for (int i = 0; i < n; i++) {
                double rij = p->rho[(size_t)i * n + j];
                if (i == j || i == k || rij < RHO_NEIGHBOUR_CUT)
                    continue;
                if (fabs(sin(nd_coords_angle(x + 3 * i, x + 3 * j, x + 3 * k, NULL, NULL))) < 0.1)
                    continue;
                for (int l = 0; l < n; l++) {
                    double rkl = p->rho[(size_t)k * n + l];
                    if (l == i || l == j || l == k || rkl < RHO_NEIGHBOUR_CUT)
                        continue;
                    if (fabs(sin(nd_coords_angle(x + 3 * j, x + 3 * k, x + 3 * l, NULL, NULL))) < 0.1)
                        continue;
                    int ok;
                    nd_coords_torsion(x + 3 * i, x + 3 * j, x + 3 * k, x + 3 * l, b, &ok);
                    if (!ok)
                        continue;
                    at[0] = i;
                    at[1] = j;
                    at[2] = k;
                    at[3] = l;
                    add_outer(p, 4, at, b, LINDH_KTAU * rij * rjk * rkl * k_ang);
                }
            }
        }
    for (int a = 0; a < n; a++) {
        if (!p->frozen[a])
            continue;
        for (int c = 0; c < 3; c++) {
            int r = 3 * a + c;
            for (int q = 0; q < n3; q++)
                p->h[(size_t)r * n3 + q] = p->h[(size_t)q * n3 + r] = 0;
            p->h[(size_t)r * n3 + r] = 1.0;
        }
    }
    for (int r = 0; r < n3; r++)
        p->h[(size_t)r * n3 + r] += p->stabilise;
    int bad = cholesky(n3, p->h, p->l);
    if (bad)
        return nd_fail(err, ND_ECOMPUTE, "preconditioner: the model Hessian is not positive definite "
                                         "(factorisation failed at column %d)", bad);
    return ND_OK;
}

int nd_precond_new(nd_precond **out, int n, const int *z, const double *x,
                   const unsigned char *frozen, double stabilise, nd_error *err)
{
    if (!out)
        return nd_fail(err, ND_EINVAL, "preconditioner: no output handle");
    *out = NULL;
    if (n < 1 || !z || !x)
        return nd_fail(err, ND_EINVAL, "preconditioner: needs n >= 1 atoms with elements and coordinates");
    for (int i = 0; i < n; i++)
        if (z[i] < 1 || z[i] > 54)
            return nd_fail(err, ND_EINVAL, "preconditioner: atom %d has atomic number %d (need 1..54)",
                           i + 1, z[i]);
    for (int i = 0; i < 3 * n; i++)
        if (!isfinite(x[i]))
            return nd_fail(err, ND_EINVAL, "preconditioner: atom %d has a non-finite coordinate", i / 3 + 1);
    nd_precond *p = calloc(1, sizeof *p);
    if (!p)
        return nd_fail(err, ND_ENOMEM, "preconditioner: out of memory");
    p->n = n;
    p->n3 = 3 * n;
    p->stabilise = stabilise > 0 ? stabilise : DEFAULT_STABILISE;
    size_t n3 = (size_t)p->n3;
    p->row = malloc((size_t)n * sizeof *p->row);
    p->frozen = calloc((size_t)n, 1);
    p->h = malloc(n3 * n3 * sizeof *p->h);
    p->l = malloc(n3 * n3 * sizeof *p->l);
    p->rho = malloc((size_t)n * (size_t)n * sizeof *p->rho);
    int s;
    if (!p->row || !p->frozen || !p->h || !p->l || !p->rho) {
        s = nd_fail(err, ND_ENOMEM, "preconditioner: out of memory for %d atoms", n);
        goto fail;
    }
    for (int i = 0; i < n; i++) {
        p->row[i] = row_of(z[i]);
        p->frozen[i] = frozen ? (frozen[i] != 0) : 0;
    }
    if ((s = build(p, x, err)) != ND_OK)
        goto fail;
    *out = p;
    return ND_OK;
fail:
    nd_precond_free(p);
    return s;
}

int nd_precond_update(nd_precond *p, const double *x, nd_error *err)
{
    if (!p || !x)
        return nd_fail(err, ND_EINVAL, "preconditioner: no handle or coordinates");
    for (int i = 0; i < p->n3; i++)
        if (!isfinite(x[i]))
            return nd_fail(err, ND_EINVAL, "preconditioner: atom %d has a non-finite coordinate", i / 3 + 1);
    return build(p, x, err);
}

/* Forward substitution L y = v, then back substitution L^T out = y. */
void nd_precond_solve(const nd_precond *p, const double *v, double *out)
{
    int n = p->n3;
    const double *l = p->l;
    if (out != v)
        memcpy(out, v, (size_t)n * sizeof *out);
    for (int i = 0; i < n; i++) {
        const double *li = l + (size_t)i * n;
        double s = out[i];
        for (int k = 0; k < i; k++)
            s -= li[k] * out[k];
        out[i] = s / li[i];
    }
    for (int i = n - 1; i >= 0; i--) {
        double s = out[i];
        for (int k = i + 1; k < n; k++)
            s -= l[(size_t)k * n + i] * out[k];
        out[i] = s / l[(size_t)i * n + i];
    }
}

void nd_precond_multiply(const nd_precond *p, const double *v, double *out)
{
    int n3 = p->n3;
    for (int r = 0; r < n3; r++) {
        double s = 0;
        for (int c = 0; c < n3; c++)
            s += p->h[(size_t)r * n3 + c] * v[c];
        out[r] = s;
    }
}

int nd_precond_atoms(const nd_precond *p)
{
    return p ? p->n : 0;
}

void nd_precond_free(nd_precond *p)
{
    if (!p)
        return;
    free(p->row);
    free(p->frozen);
    free(p->h);
    free(p->l);
    free(p->rho);
    free(p);
}

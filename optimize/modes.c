/* Normal-mode analysis of a finite-difference Hessian. */
#include "optimize/modes.h"
#include "core/numeric.h"

#include "core/elements.h"
#include "core/units.h"

#include <cblas.h>
#include <lapacke.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* sqrt(lambda [kcal/mol/angstrom^2/amu] * ND_KCALMOL_A2_AMU_TO_S2) is the
 * angular frequency in s^-1; dividing by 2 pi c (c in cm/s) gives cm^-1. */
#define WAVENUMBER_PER_ROOT_LAMBDA (sqrt(ND_KCALMOL_A2_AMU_TO_S2) / (2.0 * M_PI * ND_LIGHT_SPEED * 100.0))
/* 1 kcal/mol/angstrom^2 in N/m, and 1 mdyn/angstrom = 100 N/m. */
#define KCAL_A2_TO_MDYN_A (1000.0 * ND_CALORIE_J / ND_AVOGADRO / 1e-20 / 100.0)

/* nadir's threads are OpenMP's (the policy of potential/potential.c):
 * OpenBLAS's own threads would split the level-2 kernels inside dsyevd
 * differently at different thread counts, which changes the last bits of
 * eigenvalues and vectors, so every LAPACKE call here runs on the calling
 * thread. Setting the same value again is harmless. */
static void blas_one_thread(void)
{
    if (openblas_get_num_threads() != 1)
        openblas_set_num_threads(1);
}

void nd_modes_free(nd_modes *m)
{
    if (!m)
        return;
    free(m->atoms);
    free(m->mass);
    free(m->eigval);
    free(m->freq);
    free(m->vec);
    free(m->redmass);
    free(m->k_kcal);
    free(m->k_mdyn);
    memset(m, 0, sizeof *m);
}

int nd_modes_masses(const nd_molecule *mol, double *mass, nd_error *err)
{
    for (int i = 0; i < mol->natoms; i++) {
        int a = mol->isotope ? mol->isotope[i] : 0;
        double mi = nd_isotope_mass(mol->z[i], a);
        if (!(mi > 0.0)) {
            if (a)
                return nd_fail(err, ND_EINPUT, "atom %d: no mass for isotope %d%s", i + 1, a,
                               nd_element_symbol(mol->z[i]));
            return nd_fail(err, ND_EINPUT, "atom %d: no mass for atomic number %d", i + 1, mol->z[i]);
        }
        mass[i] = mi;
    }
    return ND_OK;
}

/* Inertia tensor about the centre of mass, diagonalised with dsyevd
 * (symmetric, so the eigenvalues are exact to rounding). */
int nd_modes_inertia(int n, const double *mass, const double *x, double moments[3],
                     double axes[9], nd_error *err)
{
    double c[3] = {0, 0, 0}, mt = 0, t[9] = {0};
    for (int i = 0; i < n; i++) {
        mt += mass[i];
        for (int k = 0; k < 3; k++)
            c[k] += mass[i] * x[3 * i + k];
    }
    if (!(mt > 0))
        return nd_fail(err, ND_EINVAL, "inertia: total mass is not positive");
    for (int k = 0; k < 3; k++)
        c[k] /= mt;
    for (int i = 0; i < n; i++) {
        double r[3] = {x[3 * i] - c[0], x[3 * i + 1] - c[1], x[3 * i + 2] - c[2]};
        double r2 = r[0] * r[0] + r[1] * r[1] + r[2] * r[2];
        for (int a = 0; a < 3; a++)
            for (int b = 0; b < 3; b++)
                t[3 * a + b] += mass[i] * ((a == b) * r2 - r[a] * r[b]);
    }
    double w[3];
    blas_one_thread();
    if (LAPACKE_dsyevd(LAPACK_ROW_MAJOR, 'V', 'U', 3, t, 3, w) != 0)
        return nd_fail(err, ND_ECOMPUTE, "inertia: eigensolver failed");
    for (int k = 0; k < 3; k++) {
        moments[k] = w[k] < 0 ? 0 : w[k];
        if (axes)
            for (int a = 0; a < 3; a++)
                axes[3 * k + a] = t[3 * a + k];
    }
    return ND_OK;
}

int nd_modes_is_linear(int n, const double *mass, const double *x, double tol)
{
    if (n < 2)
        return 0;
    if (n == 2)
        return 1;
    double mom[3], mt = 0;
    if (nd_modes_inertia(n, mass, x, mom, NULL, NULL) != ND_OK)
        return 0;
    for (int i = 0; i < n; i++)
        mt += mass[i];
    return sqrt(mom[0] / mt) < tol;
}

/* Orthonormal basis of the rigid motions in mass-weighted coordinates
 * (Eckart conditions): three translations sqrt(m_i) e_k / sqrt(M) and the
 * rotations sqrt(m_i) (a_k x r_i) / sqrt(I_k) about the principal axes a_k
 * through the centre of mass (the one about the axis of a linear molecule,
 * and all three for one atom, are left out). About principal axes these are
 * already mutually orthogonal; one modified Gram-Schmidt pass removes
 * rounding. d is next x 3n row-major; returns next. */
static int rigid_basis(int n, const double *x, const double *mass, int linear, double *d)
{
    int nc = 3 * n, next = 0;
    double mom[3], ax[9], c[3] = {0, 0, 0}, mt = 0;
    for (int i = 0; i < n; i++) {
        mt += mass[i];
        for (int k = 0; k < 3; k++)
            c[k] += mass[i] * x[3 * i + k];
    }
    for (int k = 0; k < 3; k++)
        c[k] /= mt;
    for (int k = 0; k < 3; k++, next++) {
        memset(d + (size_t)next * nc, 0, sizeof(double) * (size_t)nc);
        for (int i = 0; i < n; i++)
            d[(size_t)next * nc + 3 * i + k] = sqrt(mass[i]);
    }
    if (n > 1 && nd_modes_inertia(n, mass, x, mom, ax, NULL) == ND_OK) {
        for (int k = linear ? 1 : 0; k < 3; k++, next++) {
            double *v = d + (size_t)next * nc;
            const double *a = ax + 3 * k;
            for (int i = 0; i < n; i++) {
                double r[3] = {x[3 * i] - c[0], x[3 * i + 1] - c[1], x[3 * i + 2] - c[2]};
                double s = sqrt(mass[i]);
                v[3 * i] = s * (a[1] * r[2] - a[2] * r[1]);
                v[3 * i + 1] = s * (a[2] * r[0] - a[0] * r[2]);
                v[3 * i + 2] = s * (a[0] * r[1] - a[1] * r[0]);
            }
        }
    }
    for (int p = 0; p < next; p++) {
        double *v = d + (size_t)p * nc;
        for (int q = 0; q < p; q++) {
            const double *u = d + (size_t)q * nc;
            double dot = 0;
            for (int i = 0; i < nc; i++)
                dot += u[i] * v[i];
            for (int i = 0; i < nc; i++)
                v[i] -= dot * u[i];
        }
        double nn = 0;
        for (int i = 0; i < nc; i++)
            nn += v[i] * v[i];
        nn = sqrt(nn);
        for (int i = 0; i < nc; i++)
            v[i] /= nn;
    }
    return next;
}

static double wavenumber(double lambda)
{
    double w = sqrt(fabs(lambda)) * WAVENUMBER_PER_ROOT_LAMBDA;
    return lambda < 0 ? -w : w;
}

static int check_inputs(int n, const double *x, const double *mass, const double *h, int nc,
                        nd_error *err)
{
    if (n <= 0 || !x || !mass || !h)
        return nd_fail(err, ND_EINVAL, "modes: missing atoms, coordinates, masses or Hessian");
    for (int i = 0; i < n; i++) {
        if (!(mass[i] > 0) || !isfinite(mass[i]))
            return nd_fail(err, ND_EINPUT, "modes: atom %d has mass %g", i + 1, mass[i]);
        for (int k = 0; k < 3; k++)
            if (!isfinite(x[3 * i + k]))
                return nd_fail(err, ND_EINPUT, "modes: atom %d has a non-finite coordinate", i + 1);
    }
    for (size_t i = 0; i < (size_t)nc * nc; i++)
        if (!isfinite(h[i]))
            return nd_fail(err, ND_ECOMPUTE, "modes: the Hessian has a non-finite element");
    return ND_OK;
}

/* Builds the projector P = 1 - D^T D (D rows = rigid basis) into p (nc^2). */
static void projector(int nc, int next, const double *d, double *p)
{
    for (int i = 0; i < nc; i++)
        for (int j = 0; j < nc; j++) {
            double s = (i == j);
            for (int k = 0; k < next; k++)
                s -= d[(size_t)k * nc + i] * d[(size_t)k * nc + j];
            p[(size_t)i * nc + j] = s;
        }
}

int nd_modes_projected(int n, const double *x, const double *mass, const double *h,
                       const nd_modes_opts *opts, double *hp, nd_error *err)
{
    int nc = 3 * n;
    int status = check_inputs(n, x, mass, h, nc, err);
    if (status != ND_OK)
        return status;
    double tol = (opts && opts->linear_tol > 0) ? opts->linear_tol : ND_MODES_LINEAR_TOL;
    size_t nn = (size_t)nc * nc;
    double *d = malloc(sizeof(double) * (6 * (size_t)nc + 2 * nn));
    if (!d)
        return nd_fail(err, ND_ENOMEM, "modes: out of memory");
    double *p = d + 6 * (size_t)nc, *t = p + nn;
    blas_one_thread();
    int next = rigid_basis(n, x, mass, nd_modes_is_linear(n, mass, x, tol), d);
    projector(nc, next, d, p);
    for (int i = 0; i < nc; i++)
        for (int j = 0; j < nc; j++)
            hp[(size_t)i * nc + j] = h[(size_t)i * nc + j] / sqrt(mass[i / 3] * mass[j / 3]);
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, nc, nc, nc, 1.0, p, nc, hp, nc, 0.0, t, nc);
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, nc, nc, nc, 1.0, t, nc, p, nc, 0.0, hp, nc);
    free(d);
    return ND_OK;
}

/* Normal modes (see modes.h). Method: mass-weight H, build the orthonormal
 * rigid-motion basis D (rigid_basis), take the orthonormal complement B as
 * the unit-eigenvalue eigenvectors of the projector 1 - D^T D, diagonalise
 * B^T Hmw B (LAPACKE dsyevd) and map the eigenvectors back: q = B u
 * (mass-weighted), l = M^-1/2 q (Cartesian). Reduced mass mu = 1 / |l|^2,
 * force constant k = lambda mu. Working in the complement instead of
 * diagonalising P Hmw P keeps the near-zero rigid eigenvalues from mixing
 * with genuinely soft vibrations. Each vector's sign is fixed (largest
 * component positive) so output is reproducible. */
int nd_modes_compute(int n, const double *x, const double *mass, const int *frozen,
                     const double *h, const nd_modes_opts *opts, nd_modes *out, nd_error *err)
{
    if (!out)
        return nd_fail(err, ND_EINVAL, "modes: no output");
    memset(out, 0, sizeof *out);
    int nf = nd_hessian_count_free(n, frozen);
    if (n <= 0 || nf == 0)
        return nd_fail(err, ND_EINVAL, "modes: no free atoms");
    int nc = 3 * nf;
    /* compact coordinates and masses of the free atoms */
    double *xf = malloc(sizeof(double) * (size_t)nc);
    double *mf = malloc(sizeof(double) * (size_t)nf);
    int *atoms = malloc(sizeof(int) * (size_t)nf);
    double *scratch = NULL;
    int status = ND_OK;
    if (!xf || !mf || !atoms) {
        status = nd_fail(err, ND_ENOMEM, "modes: out of memory");
        goto fail;
    }
    for (int i = 0, f = 0; i < n; i++)
        if (!frozen || !frozen[i]) {
            atoms[f] = i;
            mf[f] = mass ? mass[i] : 0;
            if (x)
                memcpy(xf + 3 * f, x + 3 * i, sizeof(double) * 3);
            f++;
        }
    if (!x || !mass) {
        status = nd_fail(err, ND_EINVAL, "modes: missing coordinates or masses");
        goto fail;
    }
    status = check_inputs(nf, xf, mf, h, nc, err);
    if (status != ND_OK)
        goto fail;

    blas_one_thread();
    double tol = (opts && opts->linear_tol > 0) ? opts->linear_tol : ND_MODES_LINEAR_TOL;
    int project = (nf == n);
    out->linear = nd_modes_is_linear(nf, mf, xf, tol);
    if (nd_modes_inertia(nf, mf, xf, out->inertia, NULL, err) != ND_OK) {
        status = ND_ECOMPUTE;
        goto fail;
    }
    size_t nn = (size_t)nc * nc;
    /* hmw, basis (eigenvectors of P), t = hmw B, hint, d (6 x nc), w (nc), e6 (36) */
    scratch = malloc(sizeof(double) * (4 * nn + 7 * (size_t)nc + 36));
    if (!scratch) {
        status = nd_fail(err, ND_ENOMEM, "modes: out of memory for %d atoms", nf);
        goto fail;
    }
    double *hmw = scratch, *bas = hmw + nn, *t = bas + nn, *hint = t + nn, *d = hint + nn;
    double *w = d + 6 * (size_t)nc, *e6 = w + nc;
    for (int i = 0; i < nc; i++)
        for (int j = 0; j < nc; j++)
            hmw[(size_t)i * nc + j] = h[(size_t)i * nc + j] / sqrt(mf[i / 3] * mf[j / 3]);

    int next = 0, nv = nc;
    const double *b = NULL; /* nc x nv basis of the vibrational space, NULL = identity */
    if (project) {
        next = rigid_basis(nf, xf, mf, out->linear, d);
        /* raw Hessian inside the rigid space: D Hmw D^T */
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, nc, next, nc, 1.0, hmw, nc, d, nc, 0.0,
                    t, next);
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, next, next, nc, 1.0, d, nc, t, next,
                    0.0, e6, next);
        if (LAPACKE_dsyevd(LAPACK_ROW_MAJOR, 'N', 'U', next, e6, next, w) != 0) {
            status = nd_fail(err, ND_ECOMPUTE, "modes: eigensolver failed (rigid space)");
            goto fail;
        }
        for (int k = 0; k < next; k++)
            out->ext_freq[k] = wavenumber(w[k]);
        nv = nc - next;
        if (nv > 0) {
            projector(nc, next, d, bas);
            if (LAPACKE_dsyevd(LAPACK_ROW_MAJOR, 'V', 'U', nc, bas, nc, w) != 0) {
                status = nd_fail(err, ND_ECOMPUTE, "modes: eigensolver failed (projector)");
                goto fail;
            }
            /* eigenvalues ascending: the first next are 0, the rest 1; keep columns
             * next..nc-1, compacted in place to an nc x nv matrix */
            for (int i = 0; i < nc; i++)
                memmove(bas + (size_t)i * nv, bas + (size_t)i * nc + next, sizeof(double) * (size_t)nv);
            b = bas;
        }
    }
    out->nexternal = next;
    out->nmodes = nv;
    out->natoms = nf;
    if (nv == 0)
        goto done;
    if (b) {
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, nc, nv, nc, 1.0, hmw, nc, b, nv, 0.0, t, nv);
        cblas_dgemm(CblasRowMajor, CblasTrans, CblasNoTrans, nv, nv, nc, 1.0, b, nv, t, nv, 0.0, hint, nv);
    } else {
        memcpy(hint, hmw, sizeof(double) * nn);
    }
    if (LAPACKE_dsyevd(LAPACK_ROW_MAJOR, 'V', 'U', nv, hint, nv, w) != 0) {
        status = nd_fail(err, ND_ECOMPUTE, "modes: eigensolver failed (vibrations)");
        goto fail;
    }
    /* q = B U: nc x nv into t (column k = mode k) */
    if (b)
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, nc, nv, nv, 1.0, b, nv, hint, nv, 0.0, t, nv);
    else
        memcpy(t, hint, sizeof(double) * nn);

    out->eigval = malloc(sizeof(double) * (size_t)nv);
    out->freq = malloc(sizeof(double) * (size_t)nv);
    out->vec = malloc(sizeof(double) * (size_t)nv * nc);
    out->redmass = malloc(sizeof(double) * (size_t)nv);
    out->k_kcal = malloc(sizeof(double) * (size_t)nv);
    out->k_mdyn = malloc(sizeof(double) * (size_t)nv);
    if (!out->eigval || !out->freq || !out->vec || !out->redmass || !out->k_kcal || !out->k_mdyn) {
        status = nd_fail(err, ND_ENOMEM, "modes: out of memory");
        goto fail;
    }
    for (int k = 0; k < nv; k++) {
        double *l = out->vec + (size_t)k * nc, s2 = 0, big = 0;
        for (int i = 0; i < nc; i++) {
            l[i] = t[(size_t)i * nv + k] / sqrt(mf[i / 3]);
            s2 += l[i] * l[i];
        }
        double mu = 1.0 / s2, nrm = sqrt(s2);
        int ib = 0;
        for (int i = 0; i < nc; i++) {
            l[i] /= nrm;
            if (fabs(l[i]) > big + 1e-12) {
                big = fabs(l[i]);
                ib = i;
            }
        }
        if (l[ib] < 0)
            for (int i = 0; i < nc; i++)
                l[i] = -l[i];
        out->eigval[k] = w[k];
        out->freq[k] = wavenumber(w[k]);
        out->redmass[k] = mu;
        out->k_kcal[k] = w[k] * mu;
        out->k_mdyn[k] = w[k] * mu * KCAL_A2_TO_MDYN_A;
    }
done:
    out->atoms = atoms;
    out->mass = mf;
    free(xf);
    free(scratch);
    return ND_OK;
fail:
    free(xf);
    free(mf);
    free(atoms);
    free(scratch);
    out->atoms = NULL;
    out->mass = NULL;
    nd_modes_free(out);
    return status;
}

int nd_modes_is_imaginary(double freq, double grad_rms, const nd_check_opts *opts)
{
    double nf = (opts && opts->noise_freq > 0) ? opts->noise_freq : ND_MODES_NOISE_FREQ;
    double ng = (opts && opts->noise_grad > 0) ? opts->noise_grad : ND_MODES_NOISE_GRAD;
    return freq < 0 && !(-freq < nf && grad_rms < ng);
}

void nd_modes_check(const nd_modes *m, const double *g, const nd_check_opts *opts, nd_check *out)
{
    memset(out, 0, sizeof *out);
    out->first_imag = -1;
    double s = 0;
    if (g && m->natoms > 0) {
        for (int f = 0; f < m->natoms; f++)
            for (int k = 0; k < 3; k++)
                s += g[3 * m->atoms[f] + k] * g[3 * m->atoms[f] + k];
        s = sqrt(s / (3.0 * m->natoms));
    }
    out->grad_rms = s;
    out->lowest = m->nmodes > 0 ? m->freq[0] : 0.0;
    for (int k = 0; k < m->nmodes; k++) {
        if (!(m->freq[k] < 0))
            continue;
        if (!nd_modes_is_imaginary(m->freq[k], s, opts)) {
            out->nnoise++;
        } else {
            if (out->first_imag < 0)
                out->first_imag = k;
            out->nimag++;
        }
    }
    out->verdict = out->nimag > 0 ? ND_VERDICT_SADDLE : ND_VERDICT_MINIMUM;
}

int nd_modes_analyse(const nd_energy *pot, const nd_molecule *mol, const int *frozen,
                     const nd_hessian_opts *hopts, const nd_modes_opts *mopts,
                     const nd_check_opts *copts, nd_modes *modes, nd_check *check, double *g,
                     nd_error *err)
{
    if (!pot || !mol || !modes || mol->natoms <= 0)
        return nd_fail(err, ND_EINVAL, "modes: missing potential, molecule or output");
    int n = mol->natoms, nf = nd_hessian_count_free(n, frozen);
    if (nf == 0)
        return nd_fail(err, ND_EINVAL, "modes: every atom is frozen");
    size_t nc = 3 * (size_t)nf;
    double *mass = malloc(sizeof(double) * (size_t)n);
    double *h = malloc(sizeof(double) * nc * nc);
    double *gl = malloc(sizeof(double) * 3 * (size_t)n);
    int status;
    if (!mass || !h || !gl) {
        status = nd_fail(err, ND_ENOMEM, "modes: out of memory for %d atoms", n);
        goto done;
    }
    status = nd_modes_masses(mol, mass, err);
    if (status == ND_OK)
        status = nd_hessian_compute(pot, n, mol->xyz, frozen, hopts, NULL, h, gl, NULL, err);
    if (status == ND_OK)
        status = nd_modes_compute(n, mol->xyz, mass, frozen, h, mopts, modes, err);
    if (status == ND_OK && check)
        nd_modes_check(modes, gl, copts, check);
    if (status == ND_OK && g)
        memcpy(g, gl, sizeof(double) * 3 * (size_t)n);
done:
    free(mass);
    free(h);
    free(gl);
    return status;
}

int nd_modes_frame(const nd_modes *m, int mode, int natoms_mol, const double *x0, double amplitude,
                   int k, int nframes, double *out, nd_error *err)
{
    if (!m || mode < 0 || mode >= m->nmodes || nframes <= 0 || !x0 || !out)
        return nd_fail(err, ND_EINVAL, "modes: no mode %d (there are %d)", mode + 1,
                       m ? m->nmodes : 0);
    const double *v = m->vec + (size_t)mode * 3 * m->natoms;
    double big = 0;
    for (int f = 0; f < m->natoms; f++)
        big = nd_larger(big, sqrt(v[3 * f] * v[3 * f] + v[3 * f + 1] * v[3 * f + 1] + v[3 * f + 2] * v[3 * f + 2]));
    double s = big > 0 ? amplitude / big * sin(2.0 * M_PI * k / nframes) : 0.0;
    memcpy(out, x0, sizeof(double) * 3 * (size_t)natoms_mol);
    for (int f = 0; f < m->natoms; f++)
        for (int c = 0; c < 3; c++)
            out[3 * m->atoms[f] + c] += s * v[3 * f + c];
    return ND_OK;
}

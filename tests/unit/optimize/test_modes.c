/* Normal modes on analytic systems with known answers, and against numpy. */
#include "tests/lib/testutil.h"

#include "tests/lib/analytic.h"

#include "core/elements.h"
#include "core/molecule.h"
#include "core/units.h"
#include "optimize/hessian.h"
#include "optimize/modes.h"

#include <cblas.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* kcal/mol/angstrom^2 per N/m, from CODATA 2018 constants (core/units.h). */
#define NM_PER_KCAL_A2 (1000.0 * ND_CALORIE_J / ND_AVOGADRO / 1e-20)
/* The textbook harmonic-oscillator wavenumber nu = (1 / 2 pi c) sqrt(k / mu),
 * evaluated in SI units here (k in N/m, mu in amu), independently of modes.c. */
static double textbook_wavenumber(double k_nm, double mu_amu)
{
    return sqrt(k_nm / (mu_amu * ND_AMU_KG)) / (2 * M_PI * ND_LIGHT_SPEED * 100.0);
}

/* ---- potentials ---- */

/* Springs between listed pairs: E = sum k_p / 2 (r_p - r0_p)^2. With r0_p
 * set to the distances of a chosen geometry, that geometry is an exact
 * minimum, so the test knows where the minimum is without minimising. */
typedef struct {
    int npairs;
    int a[16], b[16];
    double k[16], r0[16];
} springs;

static int spring_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const springs *s = ctx;
    double e = 0;
    if (g)
        memset(g, 0, sizeof(double) * 3 * (size_t)n);
    for (int p = 0; p < s->npairs; p++) {
        int i = s->a[p], j = s->b[p];
        double d[3], r = 0;
        for (int c = 0; c < 3; c++) {
            d[c] = x[3 * i + c] - x[3 * j + c];
            r += d[c] * d[c];
        }
        r = sqrt(r);
        e += 0.5 * s->k[p] * (r - s->r0[p]) * (r - s->r0[p]);
        if (g)
            for (int c = 0; c < 3; c++) {
                double f = s->k[p] * (r - s->r0[p]) * d[c] / r;
                g[3 * i + c] += f;
                g[3 * j + c] -= f;
            }
    }
    *energy = e;
    return ND_OK;
}

/* Analytic Hessian of spring_energy (the pair block V'' u u^T + V'/r (1 - u u^T)). */
static void spring_hessian(const springs *s, int n, const double *x, double *h)
{
    int nc = 3 * n;
    memset(h, 0, sizeof(double) * (size_t)(nc * nc));
    for (int p = 0; p < s->npairs; p++) {
        int i = s->a[p], j = s->b[p];
        double u[3], r = 0;
        for (int c = 0; c < 3; c++) {
            u[c] = x[3 * i + c] - x[3 * j + c];
            r += u[c] * u[c];
        }
        r = sqrt(r);
        for (int c = 0; c < 3; c++)
            u[c] /= r;
        double d1 = s->k[p] * (r - s->r0[p]), d2 = s->k[p];
        for (int a = 0; a < 3; a++)
            for (int b = 0; b < 3; b++) {
                double blk = d2 * u[a] * u[b] + d1 / r * ((a == b) - u[a] * u[b]);
                h[(3 * i + a) * nc + 3 * i + b] += blk;
                h[(3 * j + a) * nc + 3 * j + b] += blk;
                h[(3 * i + a) * nc + 3 * j + b] -= blk;
                h[(3 * j + a) * nc + 3 * i + b] -= blk;
            }
    }
}

/* Symmetric linear triatomic O1-C-O2 (atoms 0, 1, 2 with C in the middle):
 *   E = k/2 [(r1 - r0)^2 + (r2 - r0)^2]        bond stretches
 *     + ks/2 (r1 + r2 - 2 r0)^2                symmetric-stretch term
 *     + b (q^2 - q0^2)^2,  q = r1 - r2         double well in the antisymmetric stretch
 *     + kt/2 |u1 + u2|^2                       bend (|u1 + u2| = 2 sin(delta/2))
 * where u1, u2 are unit vectors from C to the O atoms. With b = 0 it is the
 * CO2 model of the textbook; with b > 0 the linear symmetric structure is a
 * saddle whose only imaginary mode is the antisymmetric stretch. */
typedef struct {
    double k, ks, b, q0, kt, r0;
} triatomic;

static int triatomic_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const triatomic *t = ctx;
    (void)n;
    double d1[3], d2[3], r1 = 0, r2 = 0, u1[3], u2[3], w[3];
    for (int c = 0; c < 3; c++) {
        d1[c] = x[c] - x[3 + c];
        d2[c] = x[6 + c] - x[3 + c];
        r1 += d1[c] * d1[c];
        r2 += d2[c] * d2[c];
    }
    r1 = sqrt(r1);
    r2 = sqrt(r2);
    for (int c = 0; c < 3; c++) {
        u1[c] = d1[c] / r1;
        u2[c] = d2[c] / r2;
        w[c] = u1[c] + u2[c];
    }
    double q = r1 - r2, s = r1 + r2 - 2 * t->r0;
    double w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
    *energy = 0.5 * t->k * ((r1 - t->r0) * (r1 - t->r0) + (r2 - t->r0) * (r2 - t->r0)) +
              0.5 * t->ks * s * s + t->b * (q * q - t->q0 * t->q0) * (q * q - t->q0 * t->q0) +
              0.5 * t->kt * w2;
    if (!g)
        return ND_OK;
    double dq = 4 * t->b * q * (q * q - t->q0 * t->q0);
    double de1 = t->k * (r1 - t->r0) + t->ks * s + dq; /* dE/dr1 */
    double de2 = t->k * (r2 - t->r0) + t->ks * s - dq; /* dE/dr2 */
    double uw1 = u1[0] * w[0] + u1[1] * w[1] + u1[2] * w[2];
    double uw2 = u2[0] * w[0] + u2[1] * w[1] + u2[2] * w[2];
    for (int c = 0; c < 3; c++) {
        double g1 = de1 * u1[c] + t->kt * (w[c] - uw1 * u1[c]) / r1;
        double g2 = de2 * u2[c] + t->kt * (w[c] - uw2 * u2[c]) / r2;
        g[c] = g1;
        g[6 + c] = g2;
        g[3 + c] = -g1 - g2;
    }
    return ND_OK;
}

/* A rotation matrix from three unround angles, so molecules are not axis-aligned. */
static void rotate(int n, double *x, const double shift[3])
{
    double a = 0.613, b = -1.127, c = 2.291;
    double rz[9] = {cos(a), -sin(a), 0, sin(a), cos(a), 0, 0, 0, 1};
    double ry[9] = {cos(b), 0, sin(b), 0, 1, 0, -sin(b), 0, cos(b)};
    double rx[9] = {1, 0, 0, 0, cos(c), -sin(c), 0, sin(c), cos(c)};
    double m[9] = {0}, r[9] = {0};
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            for (int k = 0; k < 3; k++)
                m[3 * i + j] += rz[3 * i + k] * ry[3 * k + j];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            for (int k = 0; k < 3; k++)
                r[3 * i + j] += m[3 * i + k] * rx[3 * k + j];
    for (int p = 0; p < n; p++) {
        double v[3] = {x[3 * p], x[3 * p + 1], x[3 * p + 2]};
        for (int i = 0; i < 3; i++)
            x[3 * p + i] = r[3 * i] * v[0] + r[3 * i + 1] * v[1] + r[3 * i + 2] * v[2] + shift[i];
    }
}

static void make_molecule(nd_molecule *m, int n, const int *z, const int *iso, const double *x)
{
    nd_molecule_init(m);
    for (int i = 0; i < n; i++)
        assert_int_equal(nd_molecule_add_atom(m, z[i], x[3 * i], x[3 * i + 1], x[3 * i + 2], NULL), ND_OK);
    if (iso)
        for (int i = 0; i < n; i++)
            m->isotope[i] = iso[i];
}

/* ---- tests ---- */

/* The test potentials' gradients are their energies' derivatives (central
 * differences, tests/lib/analytic.h), at distorted, bent geometries. */
static void test_potential_gradients(void **state)
{
    (void)state;
    triatomic t = {1100.0, 310.0, 95.0, 0.153, 27.3, 1.162};
    nd_energy pt = {triatomic_energy, NULL, &t};
    double x3[9] = {0.11, -0.07, -1.21, 0.02, 0.05, 0.01, -0.13, 0.19, 1.09};
    assert_true(nd_test_gradient_error(&pt, 3, x3, 1e-5) < 1e-5);
    springs s;
    memset(&s, 0, sizeof s);
    s.npairs = 2;
    s.a[0] = 0, s.b[0] = 1, s.k[0] = 700, s.r0[0] = 1.1;
    s.a[1] = 1, s.b[1] = 2, s.k[1] = 450, s.r0[1] = 1.4;
    nd_energy ps = {spring_energy, NULL, &s};
    assert_true(nd_test_gradient_error(&ps, 3, x3, 1e-5) < 1e-5);
}

/* Harmonic diatomic with H-35Cl-like constants: k = 516 N/m (5.16
 * mdyn/angstrom), r0 = 1.2746 angstrom (both from memory of the HCl
 * spectroscopic literature; only their being realistic matters). The
 * frequency must equal the textbook nu = (1/2 pi c) sqrt(k/mu) with mu the
 * reduced mass of 1H and 35Cl (AME2020 masses from the elements table);
 * replacing 1H by 2H (isotope field) changes only mu. Goes through the
 * finite-difference Hessian (nd_modes_analyse), at a tilted, shifted geometry. */
static void test_harmonic_diatomic(void **state)
{
    (void)state;
    double k_nm = 516.0, r0 = 1.2746;
    springs s = {1, {0}, {1}, {k_nm / NM_PER_KCAL_A2}, {r0}};
    nd_energy pot = {spring_energy, NULL, &s};
    double x[6] = {0, 0, 0, 0, 0, r0}, shift[3] = {0.37, -1.21, 2.05};
    rotate(2, x, shift);
    int z[2] = {1, 17};
    for (int hiso = 1; hiso <= 2; hiso++) {
        int iso[2] = {hiso, 35};
        nd_molecule mol;
        make_molecule(&mol, 2, z, iso, x);
        nd_modes m;
        nd_check chk;
        double g[6];
        nd_error err;
        assert_int_equal(nd_modes_analyse(&pot, &mol, NULL, NULL, NULL, NULL, &m, &chk, g, &err), ND_OK);
        double mh = nd_isotope_mass(1, hiso), mcl = nd_isotope_mass(17, 35);
        double mu = mh * mcl / (mh + mcl);
        double nu = textbook_wavenumber(k_nm, mu);
        assert_int_equal(m.linear, 1);
        assert_int_equal(m.nexternal, 5);
        assert_int_equal(m.nmodes, 1);
        /* FD truncation for a spring in r is ~ (h / r0)^2 relative: < 1e-4 cm^-1 here */
        assert_close(m.freq[0], nu, 0.01);
        /* Reduced mass and force constant refer to a unit-length Cartesian
         * displacement (modes.h). A unit displacement along the mode changes
         * the bond length by (1 + rho) / sqrt(1 + rho^2), rho = mH / mCl, so
         * they are mu and k times the square of that factor's inverse and
         * square: mu_c = mu (1 + rho)^2 / (1 + rho^2), k_c likewise. */
        double rho = mh / mcl, fac = (1 + rho) * (1 + rho) / (1 + rho * rho);
        assert_rel_close(m.redmass[0], mu * fac, 1e-6, 0);
        assert_rel_close(m.k_mdyn[0], 5.16 * fac, 1e-5, 0);
        assert_rel_close(m.k_kcal[0], s.k[0] * fac, 1e-5, 0);
        if (hiso == 1)
            assert_true(nu > 2980 && nu < 3000); /* HCl harmonic wavenumber ~2991 cm^-1, from memory */
        /* the mode is the bond stretch: displacement along the bond */
        double u[3], du = 0;
        for (int c = 0; c < 3; c++) {
            u[c] = (x[3 + c] - x[c]) / r0;
            du += u[c] * m.vec[c];
        }
        assert_close(fabs(du) * sqrt(1 + (mh / mcl) * (mh / mcl)), 1.0, 1e-6);
        assert_int_equal(chk.verdict, ND_VERDICT_MINIMUM);
        assert_int_equal(chk.nimag, 0);
        assert_true(chk.grad_rms < 1e-9);
        nd_modes_free(&m);
        nd_molecule_free(&mol);
    }
}

/* With Cl frozen, the partial Hessian has three modes: the H stretch against
 * an infinitely heavy partner, nu = (1/2 pi c) sqrt(k/m_H), and two modes
 * that are zero in the exact Hessian (H swinging about the fixed atom);
 * nothing is projected. Central differences see the transverse curvature
 * [g(+h) - g(-h)] / 2h = k (r - r0) / r with r = sqrt(r0^2 + h^2), an O(h^2)
 * truncation error known in closed form, so the two small frequencies are
 * checked against it. */
static void test_partial_hessian(void **state)
{
    (void)state;
    double k_nm = 516.0, r0 = 1.2746;
    springs s = {1, {0}, {1}, {k_nm / NM_PER_KCAL_A2}, {r0}};
    nd_energy pot = {spring_energy, NULL, &s};
    double x[6] = {0.1, 0.2, 0.3, 0.1, 0.2, 0.3 + r0};
    int z[2] = {1, 17}, frozen[2] = {0, 1};
    nd_molecule mol;
    make_molecule(&mol, 2, z, NULL, x);
    nd_modes m;
    assert_int_equal(nd_modes_analyse(&pot, &mol, frozen, NULL, NULL, NULL, &m, NULL, NULL, NULL), ND_OK);
    assert_int_equal(m.nexternal, 0);
    assert_int_equal(m.nmodes, 3);
    assert_int_equal(m.natoms, 1);
    assert_int_equal(m.atoms[0], 0);
    assert_close(m.freq[2], textbook_wavenumber(k_nm, nd_element_mass(1)), 0.01);
    double h = ND_HESSIAN_STEP_DEFAULT, r = sqrt(r0 * r0 + h * h);
    double lam = s.k[0] * (r - r0) / r / nd_element_mass(1);
    double nu_t = sqrt(lam * ND_KCALMOL_A2_AMU_TO_S2) / (2 * M_PI * ND_LIGHT_SPEED * 100.0);
    assert_true(nu_t > 1 && nu_t < 20);
    assert_rel_close(m.freq[0], nu_t, 1e-4, 0);
    assert_rel_close(m.freq[1], nu_t, 1e-4, 0);
    assert_close(fabs(m.vec[2 * 3 + 2]), 1.0, 1e-9);
    nd_modes_free(&m);
    nd_molecule_free(&mol);
}

/* Linear symmetric triatomic, CO2-like, with only bond-stretch springs plus a
 * bend term. Textbook normal-coordinate solution for a linear symmetric XY2
 * molecule (E. B. Wilson, J. C. Decius and P. C. Cross, "Molecular
 * Vibrations", McGraw-Hill 1955, the linear XY2 example of the GF method):
 *   symmetric stretch       lambda1 = k / mO
 *   antisymmetric stretch   lambda3 = k (1/mO + 2/mC)
 *   bend (doubly degenerate) lambda2 = (2 kt / l^2)(1/mO + 2/mC)
 * for a bend energy kt/2 delta^2 (derived for our bend term, which is
 * kt/2 |u1+u2|^2 = kt/2 delta^2 to second order). k = 16.0 mdyn/angstrom
 * (CO2-like, from memory), l = 1.162 angstrom (from memory). Without the
 * bend term the two bends are zero-frequency modes. */
static void test_linear_triatomic(void **state)
{
    (void)state;
    double k_nm = 1600.0, l = 1.162, kt = 111.2; /* kt in kcal/mol */
    triatomic t = {k_nm / NM_PER_KCAL_A2, 0, 0, 0, kt, l};
    nd_energy pot = {triatomic_energy, NULL, &t};
    double x[9] = {0, 0, -l, 0, 0, 0, 0, 0, l}, shift[3] = {-0.44, 0.81, 0.29};
    rotate(3, x, shift);
    int z[3] = {8, 6, 8}, iso[3] = {16, 12, 16};
    double mo = nd_isotope_mass(8, 16), mc = 12.0;
    double nu1 = textbook_wavenumber(k_nm, mo);
    double nu3 = textbook_wavenumber(k_nm, 1.0 / (1 / mo + 2 / mc));
    double kt_nm = 2 * kt * NM_PER_KCAL_A2 / (l * l); /* (2 kt / l^2) in N/m */
    double nu2 = textbook_wavenumber(kt_nm, 1.0 / (1 / mo + 2 / mc));
    for (int bend = 1; bend >= 0; bend--) {
        t.kt = bend ? kt : 0;
        nd_molecule mol;
        make_molecule(&mol, 3, z, iso, x);
        nd_modes m;
        nd_check chk;
        assert_int_equal(nd_modes_analyse(&pot, &mol, NULL, NULL, NULL, NULL, &m, &chk, NULL, NULL), ND_OK);
        assert_int_equal(m.linear, 1);
        assert_int_equal(m.nexternal, 5);
        assert_int_equal(m.nmodes, 4);
        if (bend) {
            assert_true(nu2 > 600 && nu2 < 700);
            assert_close(m.freq[0], nu2, 0.05);
            assert_close(m.freq[1], nu2, 0.05);
        } else {
            /* exact zeros; the FD truncation (see test_partial_hessian) makes
             * them O(h): a tenth of the step gives a tenth of the frequency */
            nd_hessian_opts fine = {ND_HESSIAN_STEP_DEFAULT / 10, 0};
            nd_modes m2;
            assert_int_equal(nd_modes_analyse(&pot, &mol, NULL, &fine, NULL, NULL, &m2, NULL, NULL, NULL), ND_OK);
            assert_true(fabs(m.freq[0]) < 20 && fabs(m.freq[1]) < 20);
            assert_rel_close(m.freq[0] / m2.freq[0], 10.0, 0.05, 0);
            assert_rel_close(m.freq[1] / m2.freq[1], 10.0, 0.05, 0);
            nd_modes_free(&m2);
        }
        assert_close(m.freq[2], nu1, 0.05);
        assert_close(m.freq[3], nu3, 0.05);
        /* symmetric stretch: C does not move; reduced mass mO */
        assert_close(m.vec[2 * 9 + 3], 0, 1e-6);
        assert_rel_close(m.redmass[2], mo, 1e-5, 0);
        assert_int_equal(chk.nimag, 0);
        nd_modes_free(&m);
        nd_molecule_free(&mol);
    }
}

/* The same triatomic with a double well in q = r1 - r2: the symmetric
 * linear structure is a first-order saddle. GF analysis (same textbook) with
 * G_qq = 2 (1/mO + 2/mC) and F_qq = d2E/dq2 = -4 b q0^2 (no bond springs,
 * k = 0) gives exactly one negative eigenvalue lambda = -8 b q0^2 (1/mO +
 * 2/mC); the symmetric stretch s = r1 + r2 (G = 2/mO, F = ks) and the bends
 * are not coupled to q at q = 0. The step is 0.001 angstrom here: the
 * central difference of the quartic well has relative error (2h)^2 / q0^2
 * (C moves q by 2h), 2e-4 with this step, 4e-3 with the default. */
static void test_saddle(void **state)
{
    (void)state;
    double l = 1.162;
    triatomic t = {0, 620.0, 494.0, 0.153, 111.2, l};
    nd_hessian_opts ho = {0.001, 0};
    nd_energy pot = {triatomic_energy, NULL, &t};
    double x[9] = {0, 0, -l, 0, 0, 0, 0, 0, l}, shift[3] = {1.1, 0.2, -0.7};
    rotate(3, x, shift);
    int z[3] = {8, 6, 8};
    nd_molecule mol;
    make_molecule(&mol, 3, z, NULL, x);
    double mo = nd_element_mass(8), mc = nd_element_mass(6);
    double lam = -8 * t.b * t.q0 * t.q0 * (1 / mo + 2 / mc);
    double nu_imag = -sqrt(-lam * ND_KCALMOL_A2_AMU_TO_S2) / (2 * M_PI * ND_LIGHT_SPEED * 100.0);
    double lam1 = (2 / mo) * t.ks;
    double nu1 = sqrt(lam1 * ND_KCALMOL_A2_AMU_TO_S2) / (2 * M_PI * ND_LIGHT_SPEED * 100.0);
    nd_modes m;
    nd_check chk;
    assert_int_equal(nd_modes_analyse(&pot, &mol, NULL, &ho, NULL, NULL, &m, &chk, NULL, NULL), ND_OK);
    assert_int_equal(m.nmodes, 4);
    assert_true(nu_imag < -300);
    assert_close(m.freq[0], nu_imag, 0.05);
    assert_true(m.freq[1] > 0);
    assert_close(m.freq[3], nu1, 0.05);
    assert_int_equal(chk.verdict, ND_VERDICT_SADDLE);
    assert_int_equal(chk.nimag, 1);
    assert_int_equal(chk.nnoise, 0);
    assert_int_equal(chk.first_imag, 0);
    assert_true(m.k_kcal[0] < 0 && m.k_mdyn[0] < 0);
    nd_modes_free(&m);
    nd_molecule_free(&mol);
}

/* A five-atom cluster with ten springs (rigid, no symmetry) at its exact
 * minimum. With the analytic Hessian, the raw Hessian inside the rigid-motion
 * space is zero (the potential is invariant and the gradient vanishes), the
 * projected mass-weighted Hessian has six zero eigenvalues, and numpy's eigh
 * (a reference library; numpy.linalg.eigh on the same raw Hessian, with the
 * projection and the cm^-1 conversion written independently in Python using
 * scipy.constants) gives the same nine frequencies. */
static const double X5[15] = {0.000, 0.000, 0.000,  1.523, 0.000, 0.000,  -0.512, 1.431, 0.000,
                              -0.498, -0.703, 1.262, 1.987, 0.911, 0.624};
static void cluster(springs *s)
{
    memset(s, 0, sizeof *s);
    double ks[10] = {612, 455, 389, 702, 251, 330, 498, 177, 265, 544};
    for (int i = 0; i < 5; i++)
        for (int j = i + 1; j < 5; j++) {
            int p = s->npairs++;
            s->a[p] = i;
            s->b[p] = j;
            s->k[p] = ks[p];
            double r = 0;
            for (int c = 0; c < 3; c++)
                r += (X5[3 * i + c] - X5[3 * j + c]) * (X5[3 * i + c] - X5[3 * j + c]);
            s->r0[p] = sqrt(r);
        }
}

static void test_projection_and_numpy(void **state)
{
    (void)state;
    springs s;
    cluster(&s);
    double h[225], hp[225];
    double mass[5] = {12.0, 15.99491461957, 1.00782503223, 14.00307400443, 2.01410177812};
    spring_hessian(&s, 5, X5, h);
    nd_modes m;
    assert_int_equal(nd_modes_compute(5, X5, mass, NULL, h, NULL, &m, NULL), ND_OK);
    assert_int_equal(m.linear, 0);
    assert_int_equal(m.nexternal, 6);
    assert_int_equal(m.nmodes, 9);
    for (int k = 0; k < 6; k++)
        assert_true(fabs(m.ext_freq[k]) < 1e-3);
    for (int k = 0; k < 9; k++)
        assert_true(m.freq[k] > 50);
    assert_int_equal(nd_modes_projected(5, X5, mass, h, NULL, hp, NULL), ND_OK);

    /* Reference: numpy/scipy in a child process. */
    const char *py =
        "import sys, numpy as np\n"
        "from scipy import constants as C\n"
        "d = np.loadtxt(sys.argv[1])\n"
        "x = d[0:5,0:3]; m = d[5:10,0]; H = d[10:25,:]\n"
        "sm = np.repeat(np.sqrt(m), 3)\n"
        "Hm = H / np.outer(sm, sm)\n"
        "com = (m[:,None]*x).sum(0)/m.sum(); r = x - com\n"
        "vs = []\n"
        "for k in range(3):\n"
        "    v = np.zeros((5,3)); v[:,k] = np.sqrt(m); vs.append(v.ravel())\n"
        "for k in range(3):\n"
        "    e = np.zeros(3); e[k] = 1\n"
        "    vs.append((np.sqrt(m)[:,None]*np.cross(e, r)).ravel())\n"
        "Q, _ = np.linalg.qr(np.array(vs).T)\n"
        "P = np.eye(15) - Q @ Q.T\n"
        "w, _ = np.linalg.eigh(P @ Hm @ P)\n"
        "conv = 1000*C.calorie/C.N_A/1e-20/C.atomic_mass\n"
        "nu = np.sign(w)*np.sqrt(np.abs(w)*conv)/(2*np.pi*C.c*100)\n"
        "print(' '.join('%.10f' % v for v in nu))\n";
    char script[256], data[256];
    const char *p1 = nd_test_write_temp(py, ".py");
    assert_non_null(p1);
    snprintf(script, sizeof script, "%s", p1);
    FILE *f;
    const char *p2 = nd_test_write_temp("", ".txt");
    assert_non_null(p2);
    snprintf(data, sizeof data, "%s", p2);
    f = fopen(data, "w");
    assert_non_null(f);
    for (int i = 0; i < 10; i++) {
        for (int j = 0; j < 15; j++)
            fprintf(f, "%.17g ", (i < 5 && j < 3) ? X5[3 * i + j] : (i >= 5 && j == 0) ? mass[i - 5] : 0.0);
        fputc('\n', f);
    }
    for (int i = 0; i < 15; i++) {
        for (int j = 0; j < 15; j++)
            fprintf(f, "%.17g ", h[i * 15 + j]);
        fputc('\n', f);
    }
    fclose(f);
    char cmd[600];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s %s 2>&1", script, data);
    FILE *pp = popen(cmd, "r");
    assert_non_null(pp);
    double ref[15];
    int got = 0;
    while (got < 15 && fscanf(pp, "%lf", &ref[got]) == 1)
        got++;
    int rc = pclose(pp);
    remove(script);
    remove(data);
    if (rc != 0 || got != 15) {
        /* numpy/scipy missing: the comparison cannot run here */
        nd_modes_free(&m);
        skip();
    }
    /* numpy: six zeros (|nu| tiny: the sqrt of rounding-level eigenvalues) then the nine vibrations */
    for (int k = 0; k < 6; k++)
        assert_true(fabs(ref[k]) < 1e-2);
    for (int k = 0; k < 9; k++)
        assert_rel_close(m.freq[k], ref[6 + k], 1e-9, 0);
    nd_modes_free(&m);
}

/* The FD Hessian of the same cluster keeps the rigid-space block small
 * (O(h^2)) and gives the analytic frequencies to a fraction of a cm^-1. */
static void test_fd_matches_analytic(void **state)
{
    (void)state;
    springs s;
    cluster(&s);
    nd_energy pot = {spring_energy, NULL, &s};
    double h[225], hfd[225];
    double mass[5] = {12.0, 15.99491461957, 1.00782503223, 14.00307400443, 2.01410177812};
    spring_hessian(&s, 5, X5, h);
    assert_int_equal(nd_hessian_compute(&pot, 5, X5, NULL, NULL, NULL, hfd, NULL, NULL, NULL), ND_OK);
    nd_modes a, b;
    assert_int_equal(nd_modes_compute(5, X5, mass, NULL, h, NULL, &a, NULL), ND_OK);
    assert_int_equal(nd_modes_compute(5, X5, mass, NULL, hfd, NULL, &b, NULL), ND_OK);
    for (int k = 0; k < 9; k++)
        assert_close(a.freq[k], b.freq[k], 0.05);
    for (int k = 0; k < 6; k++)
        assert_true(fabs(b.ext_freq[k]) < 5.0);
    nd_modes_free(&a);
    nd_modes_free(&b);
}

/* Determinism: the same modes bit for bit whatever OpenBLAS's or OpenMP's
 * thread count was before the call. */
static void test_thread_count(void **state)
{
    (void)state;
    springs s;
    cluster(&s);
    nd_energy pot = {spring_energy, NULL, &s};
    int z[5] = {6, 8, 1, 7, 1}, iso[5] = {12, 16, 1, 14, 2};
    nd_molecule mol;
    make_molecule(&mol, 5, z, iso, X5);
    nd_modes a, b;
    int saved = omp_get_max_threads();
    omp_set_num_threads(1);
    openblas_set_num_threads(1);
    assert_int_equal(nd_modes_analyse(&pot, &mol, NULL, NULL, NULL, NULL, &a, NULL, NULL, NULL), ND_OK);
    omp_set_num_threads(2);
    openblas_set_num_threads(2);
    assert_int_equal(nd_modes_analyse(&pot, &mol, NULL, NULL, NULL, NULL, &b, NULL, NULL, NULL), ND_OK);
    omp_set_num_threads(saved);
    assert_int_equal(a.nmodes, b.nmodes);
    assert_true(memcmp(a.freq, b.freq, sizeof(double) * (size_t)a.nmodes) == 0);
    assert_true(memcmp(a.vec, b.vec, sizeof(double) * (size_t)a.nmodes * 15) == 0);
    nd_modes_free(&a);
    nd_modes_free(&b);
    nd_molecule_free(&mol);
}

static void test_linearity(void **state)
{
    (void)state;
    double mass[3] = {15.999, 12.011, 15.999};
    for (int deg = 0; deg <= 10; deg += 5) {
        double th = (180.0 - deg) * M_PI / 180.0 / 2;
        double x[9] = {-1.16 * sin(th), -1.16 * cos(th), 0, 0, 0, 0, 1.16 * sin(th), -1.16 * cos(th), 0};
        int lin = nd_modes_is_linear(3, mass, x, ND_MODES_LINEAR_TOL);
        /* bent by 5 degrees: sqrt(I_min / M) ~ 0.023 angstrom > 0.01 */
        assert_int_equal(lin, deg == 0);
    }
    double half[9] = {-1.16, 0.004, 0, 0, -0.002, 0, 1.16, 0.003, 0}; /* ~0.4 degree bend */
    assert_int_equal(nd_modes_is_linear(3, mass, half, ND_MODES_LINEAR_TOL), 1);
    double one[3] = {0, 0, 0};
    assert_int_equal(nd_modes_is_linear(1, mass, one, ND_MODES_LINEAR_TOL), 0);
    double mom[3];
    /* two point masses 12 and 16 at 1.5 angstrom: I = mu r^2 */
    double two[6] = {0, 0, 0, 1.5, 0, 0}, m2[2] = {12, 16};
    assert_int_equal(nd_modes_inertia(2, m2, two, mom, NULL, NULL), ND_OK);
    assert_close(mom[0], 0, 1e-12);
    assert_rel_close(mom[2], 12.0 * 16 / 28 * 2.25, 1e-12, 0);
}

/* One atom: three translations, no vibrations. */
static void test_single_atom(void **state)
{
    (void)state;
    double x[3] = {0.3, 0.1, 0.2}, mass[1] = {39.95}, h[9] = {0};
    nd_modes m;
    assert_int_equal(nd_modes_compute(1, x, mass, NULL, h, NULL, &m, NULL), ND_OK);
    assert_int_equal(m.nexternal, 3);
    assert_int_equal(m.nmodes, 0);
    nd_check c;
    nd_modes_check(&m, NULL, NULL, &c);
    assert_int_equal(c.verdict, ND_VERDICT_MINIMUM);
    nd_modes_free(&m);
}

/* The noise rule on made-up spectra. */
static void test_check_rule(void **state)
{
    (void)state;
    double freq[4] = {-212.0, -17.5, 3.2, 1450.0};
    int atoms[2] = {0, 1};
    nd_modes m;
    memset(&m, 0, sizeof m);
    m.nmodes = 4;
    m.natoms = 2;
    m.atoms = atoms;
    m.freq = freq;
    double gsmall[6] = {1e-3, -2e-3, 0, 0, 1e-3, 0}, gbig[6] = {0.3, -0.2, 0.1, 0.1, 0.2, 0.4};
    nd_check c;
    nd_modes_check(&m, gsmall, NULL, &c);
    assert_int_equal(c.nimag, 1);
    assert_int_equal(c.nnoise, 1);
    assert_int_equal(c.first_imag, 0);
    assert_int_equal(c.verdict, ND_VERDICT_SADDLE);
    assert_close(c.lowest, -212.0, 0);
    /* a large residual gradient: nothing may be dismissed */
    nd_modes_check(&m, gbig, NULL, &c);
    assert_int_equal(c.nimag, 2);
    assert_int_equal(c.nnoise, 0);
    assert_true(c.grad_rms > ND_MODES_NOISE_GRAD);
    /* only the noise-level mode: a minimum */
    freq[0] = -25.0;
    nd_modes_check(&m, gsmall, NULL, &c);
    assert_int_equal(c.verdict, ND_VERDICT_MINIMUM);
    assert_int_equal(c.nnoise, 2);
    /* a stricter threshold counts it */
    nd_check_opts o = {20.0, 0};
    nd_modes_check(&m, gsmall, &o, &c);
    assert_int_equal(c.nimag, 1);
    assert_int_equal(c.nnoise, 1);
}

static void test_frames(void **state)
{
    (void)state;
    double k_nm = 516.0, r0 = 1.2746;
    springs s = {1, {0}, {1}, {k_nm / NM_PER_KCAL_A2}, {r0}};
    nd_energy pot = {spring_energy, NULL, &s};
    double x[6] = {0, 0, 0, 0, 0, r0}, out[6];
    int z[2] = {1, 17};
    nd_molecule mol;
    make_molecule(&mol, 2, z, NULL, x);
    nd_modes m;
    assert_int_equal(nd_modes_analyse(&pot, &mol, NULL, NULL, NULL, NULL, &m, NULL, NULL, NULL), ND_OK);
    assert_int_equal(nd_modes_frame(&m, 0, 2, x, 0.25, 5, 20, out, NULL), ND_OK);
    assert_close(fabs(out[2] - x[2]), 0.25, 1e-12); /* H, which moves most, at the turning point */
    assert_true(fabs(out[5] - x[5]) < 0.25 * 0.1);
    assert_int_equal(nd_modes_frame(&m, 0, 2, x, 0.25, 0, 20, out, NULL), ND_OK);
    assert_true(memcmp(out, x, sizeof x) == 0);
    nd_error err;
    assert_int_equal(nd_modes_frame(&m, 1, 2, x, 0.25, 0, 20, out, &err), ND_EINVAL);
    assert_contains(err.msg, "no mode 2");
    nd_modes_free(&m);
    nd_molecule_free(&mol);
}

static void test_errors(void **state)
{
    (void)state;
    nd_molecule mol;
    double x[6] = {0, 0, 0, 0, 0, 1.3}, mass[2] = {1.008, 35.45}, h[36] = {0}, mm[2];
    int z[2] = {1, 17}, iso[2] = {5, 0};
    make_molecule(&mol, 2, z, iso, x);
    nd_error err;
    assert_int_equal(nd_modes_masses(&mol, mm, &err), ND_EINPUT);
    assert_contains(err.msg, "atom 1");
    assert_contains(err.msg, "isotope 5H");
    mol.isotope[0] = 2;
    assert_int_equal(nd_modes_masses(&mol, mm, &err), ND_OK);
    assert_close(mm[0], 2.01410177812, 0); /* AME2020, via the elements table */
    nd_modes m;
    mass[1] = 0;
    assert_int_equal(nd_modes_compute(2, x, mass, NULL, h, NULL, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "atom 2");
    mass[1] = 35.45;
    h[7] = NAN;
    assert_int_equal(nd_modes_compute(2, x, mass, NULL, h, NULL, &m, &err), ND_ECOMPUTE);
    assert_int_equal(nd_modes_compute(0, x, mass, NULL, h, NULL, &m, &err), ND_EINVAL);
    int all[2] = {1, 1};
    assert_int_equal(nd_modes_compute(2, x, mass, all, h, NULL, &m, &err), ND_EINVAL);
    assert_null(m.freq);
    nd_modes_free(NULL);
    nd_molecule_free(&mol);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_potential_gradients),  cmocka_unit_test(test_harmonic_diatomic),
        cmocka_unit_test(test_partial_hessian),
        cmocka_unit_test(test_linear_triatomic),     cmocka_unit_test(test_saddle),
        cmocka_unit_test(test_projection_and_numpy), cmocka_unit_test(test_fd_matches_analytic),
        cmocka_unit_test(test_linearity),            cmocka_unit_test(test_single_atom),
        cmocka_unit_test(test_thread_count),
        cmocka_unit_test(test_check_rule),           cmocka_unit_test(test_frames),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

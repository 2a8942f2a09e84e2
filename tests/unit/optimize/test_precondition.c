/* The Lindh model Hessian preconditioner (optimize/precondition.c): exact
 * invariances, the stretch constant of a diatomic, solves, frozen atoms,
 * what it saves in force calls, and its error paths. */
#include "tests/lib/testutil.h"

#include "core/units.h"
#include "optimize/minimize.h"
#include "optimize/precondition.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void build(int i, nd_molecule *m)
{
    nd_molecule_init(m);
    assert_int_equal(nd_test_molecule_build(i, m, NULL), ND_OK);
    nd_test_perturb(m->natoms, m->xyz, 0.04, 31 + (uint64_t)i);
}

/* Internal coordinates do not change under rigid translations and
 * rotations, so the model part of H annihilates them: H t = eps t. */
static void test_invariance(void **state)
{
    (void)state;
    nd_molecule m;
    build(25, &m); /* toluene */
    int n = m.natoms;
    nd_precond *p;
    double eps = 0.731;
    assert_int_equal(nd_precond_new(&p, n, m.z, m.xyz, NULL, eps, NULL), ND_OK);
    assert_int_equal(nd_precond_atoms(p), n);
    double *t = malloc(3 * (size_t)n * sizeof *t), *ht = malloc(3 * (size_t)n * sizeof *ht);
    const double w[3] = {0.37, -0.81, 0.45};
    for (int mode = 0; mode < 2; mode++) {
        for (int a = 0; a < n; a++) {
            const double *x = m.xyz + 3 * a;
            if (mode == 0) {
                t[3 * a] = 0.3, t[3 * a + 1] = -0.5, t[3 * a + 2] = 0.8;
            } else { /* w x (x - x_0) */
                t[3 * a] = w[1] * x[2] - w[2] * x[1];
                t[3 * a + 1] = w[2] * x[0] - w[0] * x[2];
                t[3 * a + 2] = w[0] * x[1] - w[1] * x[0];
            }
        }
        nd_precond_multiply(p, t, ht);
        for (int i = 0; i < 3 * n; i++)
            assert_close(ht[i], eps * t[i], 1e-9);
    }
    /* solve inverts multiply */
    for (int i = 0; i < 3 * n; i++)
        t[i] = sin(0.7 * i + 0.2);
    nd_precond_multiply(p, t, ht);
    nd_precond_solve(p, ht, ht);
    for (int i = 0; i < 3 * n; i++)
        assert_close(ht[i], t[i], 1e-9);
    /* rebuilt at another geometry it is a different matrix */
    double *y = malloc(3 * (size_t)n * sizeof *y);
    memcpy(y, m.xyz, 3 * (size_t)n * sizeof *y);
    y[0] += 0.2;
    nd_precond_multiply(p, t, ht);
    double before = ht[0];
    assert_int_equal(nd_precond_update(p, y, NULL), ND_OK);
    nd_precond_multiply(p, t, ht);
    assert_true(fabs(ht[0] - before) > 1e-6);
    free(y);
    free(t);
    free(ht);
    nd_precond_free(p);
    nd_molecule_free(&m);
}

/* H2 at r = 0.7414 A: one stretch, k = k_r rho with rho = exp(alpha (r_ref^2
 * - r^2)), alpha = 1.0, r_ref = 1.35 bohr, k_r = 0.45 hartree/bohr^2
 * (Lindh et al. 1995, constants from memory); along the bond, relative
 * motion (-u, u) has eigenvalue 2k + eps. */
static void test_diatomic(void **state)
{
    (void)state;
    const int z[2] = {1, 1};
    double x[6] = {0.1, 0.2, 0.3, 0.1 + 0.7414 * 0.6, 0.2 + 0.7414 * 0.8, 0.3};
    nd_precond *p;
    assert_int_equal(nd_precond_new(&p, 2, z, x, NULL, 0.25, NULL), ND_OK);
    double rb = 0.7414 / ND_BOHR_ANGSTROM;
    double k = 0.45 * exp(1.35 * 1.35 - rb * rb) * ND_HARTREE_KCALMOL / (ND_BOHR_ANGSTROM * ND_BOHR_ANGSTROM);
    double v[6] = {-0.6, -0.8, 0, 0.6, 0.8, 0}, hv[6];
    nd_precond_multiply(p, v, hv);
    for (int i = 0; i < 6; i++)
        assert_close(hv[i], (2 * k + 0.25) * v[i], 1e-9 * k);
    /* perpendicular motion sees only the stabiliser (no bends in a diatomic) */
    double q[6] = {0.8, -0.6, 0, 0, 0, 0.5};
    nd_precond_multiply(p, q, hv);
    for (int i = 0; i < 6; i++)
        assert_close(hv[i], 0.25 * q[i], 1e-12);
    nd_precond_free(p);
    /* the default stabiliser is 1 kcal/mol/A^2 */
    assert_int_equal(nd_precond_new(&p, 2, z, x, NULL, 0, NULL), ND_OK);
    nd_precond_multiply(p, q, hv);
    assert_close(hv[0], 0.8, 1e-12);
    nd_precond_free(p);
}

/* Frozen atoms are decoupled: a vector zero on them stays exactly zero. */
static void test_frozen(void **state)
{
    (void)state;
    nd_molecule m;
    build(2, &m);
    int n = m.natoms;
    unsigned char *fz = calloc((size_t)n, 1);
    fz[1] = fz[5] = 1;
    nd_precond *p;
    assert_int_equal(nd_precond_new(&p, n, m.z, m.xyz, fz, 0, NULL), ND_OK);
    double *v = malloc(3 * (size_t)n * sizeof *v);
    for (int i = 0; i < 3 * n; i++)
        v[i] = fz[i / 3] ? 0 : cos(1.3 * i);
    nd_precond_solve(p, v, v);
    for (int i = 0; i < 3 * n; i++)
        if (fz[i / 3])
            assert_true(v[i] == 0);
        else if (i % 3 == 0)
            assert_true(v[i] != 0);
    free(v);
    free(fz);
    nd_precond_free(p);
    nd_molecule_free(&m);
}

/* What the preconditioner saves: force calls of L-BFGS with and without it
 * on perturbed test molecules with the bonded test potential, to the
 * ranking preset. Both runs reach the same minimum energy (same basin). */
static void test_saves_calls(void **state)
{
    (void)state;
    const int pick[] = {2, 5, 9, 15, 21, 27};
    int sum_plain = 0, sum_pc = 0;
    for (size_t k = 0; k < sizeof pick / sizeof pick[0]; k++) {
        nd_molecule m;
        nd_molecule_init(&m);
        assert_int_equal(nd_test_molecule_build(pick[k], &m, NULL), ND_OK);
        int n = m.natoms;
        nd_test_perturb(n, m.xyz, 0.1, 500 + (uint64_t)k);
        nd_test_bonded *b;
        assert_int_equal(nd_test_bonded_new(&b, &m, NULL), ND_OK);
        nd_energy pot = {nd_test_bonded_energy, NULL, b};
        double *x = malloc(3 * (size_t)n * sizeof *x);
        nd_minimize_options o;
        nd_minimize_options_default(&o);
        o.stop.max_force = o.stop.rms_force = 0.01;
        nd_minimize_result r0, r1;
        memcpy(x, m.xyz, 3 * (size_t)n * sizeof *x);
        assert_int_equal(nd_minimize(NULL, &pot, n, x, &o, &r0, NULL), ND_OK);
        nd_precond *p;
        assert_int_equal(nd_precond_new(&p, n, m.z, m.xyz, NULL, 0, NULL), ND_OK);
        o.precond = p;
        memcpy(x, m.xyz, 3 * (size_t)n * sizeof *x);
        assert_int_equal(nd_minimize(NULL, &pot, n, x, &o, &r1, NULL), ND_OK);
        assert_close(r0.energy, r1.energy, 1e-3);
        print_message("# %-16s force calls: plain %4d, preconditioned %4d\n", m.title, r0.force_calls,
                      r1.force_calls);
        sum_plain += r0.force_calls;
        sum_pc += r1.force_calls;
        nd_precond_free(p);
        nd_test_bonded_free(b);
        free(x);
        nd_molecule_free(&m);
    }
    print_message("# total force calls: plain %d, preconditioned %d\n", sum_plain, sum_pc);
    assert_true(2 * sum_pc < sum_plain);
}

static void test_errors(void **state)
{
    (void)state;
    const int z[2] = {6, 8}, bad0[2] = {6, 0}, bad55[2] = {55, 6};
    double x[6] = {0, 0, 0, 1.13, 0, 0};
    nd_precond *p = (nd_precond *)x;
    nd_error err;
    assert_int_equal(nd_precond_new(NULL, 2, z, x, NULL, 0, &err), ND_EINVAL);
    assert_int_equal(nd_precond_new(&p, 0, z, x, NULL, 0, &err), ND_EINVAL);
    assert_null(p);
    assert_int_equal(nd_precond_new(&p, 2, NULL, x, NULL, 0, &err), ND_EINVAL);
    assert_int_equal(nd_precond_new(&p, 2, z, NULL, NULL, 0, &err), ND_EINVAL);
    assert_int_equal(nd_precond_new(&p, 2, bad0, x, NULL, 0, &err), ND_EINVAL);
    assert_contains(err.msg, "atom 2 has atomic number 0");
    assert_int_equal(nd_precond_new(&p, 2, bad55, x, NULL, 0, &err), ND_EINVAL);
    x[4] = NAN;
    assert_int_equal(nd_precond_new(&p, 2, z, x, NULL, 0, &err), ND_EINVAL);
    assert_contains(err.msg, "atom 2 has a non-finite coordinate");
    x[4] = 0;
    assert_int_equal(nd_precond_new(&p, 2, z, x, NULL, 0, &err), ND_OK);
    x[1] = INFINITY;
    assert_int_equal(nd_precond_update(p, x, &err), ND_EINVAL);
    assert_int_equal(nd_precond_update(NULL, x, &err), ND_EINVAL);
    assert_int_equal(nd_precond_update(p, NULL, &err), ND_EINVAL);
    nd_precond_free(p);
    assert_int_equal(nd_precond_atoms(NULL), 0);
    nd_precond_free(NULL);
    /* a model without its stabiliser is singular (rigid motions): with a
     * negligible one the factorisation fails and says so */
    nd_molecule m;
    build(0, &m);
    int s = nd_precond_new(&p, m.natoms, m.z, m.xyz, NULL, 1e-300, &err);
    assert_int_equal(s, ND_ECOMPUTE);
    assert_contains(err.msg, "not positive definite");
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_invariance), cmocka_unit_test(test_diatomic), cmocka_unit_test(test_frozen),
        cmocka_unit_test(test_saves_calls), cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

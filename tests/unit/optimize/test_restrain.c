/* Frozen atoms and harmonic restraints (optimize/restrain.c): exact
 * gradients, targets held after minimisation with both methods, frozen
 * atoms bit-for-bit in place, a relaxed torsion scan, and every error path. */
#include "tests/lib/testutil.h"

#include "optimize/minimize.h"
#include "optimize/restrain.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* butane (atoms 0-3 the carbons) with the bonded test potential */
typedef struct fixture {
    nd_molecule mol;
    nd_test_bonded *bonded;
    nd_energy pot;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    nd_molecule_init(&f->mol);
    if (nd_test_molecule_build(2, &f->mol, NULL) != ND_OK || nd_test_bonded_new(&f->bonded, &f->mol, NULL) != ND_OK)
        return -1;
    f->pot = (nd_energy){nd_test_bonded_energy, NULL, f->bonded};
    nd_test_perturb(f->mol.natoms, f->mol.xyz, 0.05, 808);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    nd_test_bonded_free(f->bonded);
    nd_molecule_free(&f->mol);
    free(f);
    return 0;
}

static const int DIST[2] = {0, 3}, ANG[3] = {0, 1, 2}, TORS[4] = {0, 1, 2, 3};

static void test_gradient(void **state)
{
    fixture *f = *state;
    nd_restraints *r;
    nd_error err;
    int n = f->mol.natoms;
    assert_int_equal(nd_restraints_new(&r, &f->pot, n, &err), ND_OK);
    int idx;
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_DISTANCE, DIST, 3.217, 48.5, &idx, &err), ND_OK);
    assert_int_equal(idx, 0);
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_ANGLE, ANG, 97.3, 61.2, &idx, &err), ND_OK);
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_TORSION, TORS, -71.4, 33.9, &idx, &err), ND_OK);
    assert_int_equal(idx, 2);
    assert_int_equal(nd_restraints_count(r), 3);
    nd_energy w = nd_restraints_energy(r);
    double fd = nd_test_gradient_error(&w, n, f->mol.xyz, 1e-5);
    assert_true(fd >= 0 && fd < 1e-5);
    /* the wrapper adds exactly the penalty */
    double e, e0, *g = malloc(3 * (size_t)n * sizeof *g);
    w.fn(w.ctx, n, f->mol.xyz, &e, g);
    f->pot.fn(f->pot.ctx, n, f->mol.xyz, &e0, NULL);
    assert_close(e - e0, nd_restraints_penalty(r, f->mol.xyz, NULL), 1e-12);
    assert_true(nd_restraints_penalty(r, f->mol.xyz, NULL) > 0);
    /* penalty by hand from the measured values */
    double d = nd_restraints_value(r, 0, f->mol.xyz) - 3.217, a = (nd_restraints_value(r, 1, f->mol.xyz) - 97.3) * M_PI / 180,
           t = remainder((nd_restraints_value(r, 2, f->mol.xyz) + 71.4) * M_PI / 180, 2 * M_PI);
    assert_close(nd_restraints_penalty(r, f->mol.xyz, NULL), 0.5 * (48.5 * d * d + 61.2 * a * a + 33.9 * t * t), 1e-10);
    free(g);
    nd_restraints_free(r);
}

/* Stiff restraints hold their targets after minimisation, with both methods. */
static void test_targets_hold(void **state)
{
    fixture *f = *state;
    int n = f->mol.natoms;
    for (int t = 0; t < 2; t++) {
        nd_restraints *r;
        assert_int_equal(nd_restraints_new(&r, &f->pot, n, NULL), ND_OK);
        assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_TORSION, TORS, 73.6, 5000, NULL, NULL), ND_OK);
        assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_ANGLE, (const int[]){1, 2, 3}, 117.25, 5000, NULL, NULL), ND_OK);
        assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_DISTANCE, (const int[]){0, 2}, 2.618, 5000, NULL, NULL), ND_OK);
        nd_energy w = nd_restraints_energy(r);
        double *x = malloc(3 * (size_t)n * sizeof *x);
        memcpy(x, f->mol.xyz, 3 * (size_t)n * sizeof *x);
        nd_minimize_options o;
        nd_minimize_options_default(&o);
        o.stop.max_force = o.stop.rms_force = 0.01;
        o.stop.max_steps = 20000;
        o.fire_dt = 0.01; /* restraint stiffness 5000: dt < 2/sqrt(5000) = 0.028 */
        o.fire_dt_max = 0.05;
        nd_minimize_result res;
        assert_int_equal(nd_minimize(nd_minimizer_type_at(t), &w, n, x, &o, &res, NULL), ND_OK);
        /* residual = (force the potential exerts on the coordinate) / k; the
         * bonded potential pushes with at most ~100 kcal/mol per unit: within
         * 0.02 rad (1.1 degrees) and 0.02 A */
        assert_close(nd_restraints_value(r, 0, x), 73.6, 1.2);
        assert_close(nd_restraints_value(r, 1, x), 117.25, 1.2);
        assert_close(nd_restraints_value(r, 2, x), 2.618, 0.02);
        free(x);
        nd_restraints_free(r);
    }
}

/* Frozen atoms do not move at all, with either method, and with the
 * preconditioner built with the same frozen flags. */
static void test_frozen(void **state)
{
    fixture *f = *state;
    int n = f->mol.natoms;
    for (int t = 0; t < 3; t++) {
        nd_restraints *r;
        assert_int_equal(nd_restraints_new(&r, &f->pot, n, NULL), ND_OK);
        assert_int_equal(nd_restraints_freeze(r, 1, NULL), ND_OK);
        assert_int_equal(nd_restraints_freeze(r, 6, NULL), ND_OK);
        assert_int_equal(nd_restraints_freeze(r, 6, NULL), ND_OK); /* twice is fine */
        const unsigned char *fz = nd_restraints_frozen(r);
        assert_true(fz[1] && fz[6] && !fz[0]);
        nd_energy w = nd_restraints_energy(r);
        double *x = malloc(3 * (size_t)n * sizeof *x);
        memcpy(x, f->mol.xyz, 3 * (size_t)n * sizeof *x);
        nd_minimize_options o;
        nd_minimize_options_default(&o);
        nd_precond *pc = NULL;
        if (t == 2) {
            assert_int_equal(nd_precond_new(&pc, n, f->mol.z, x, fz, 0, NULL), ND_OK);
            o.precond = pc;
        }
        nd_minimize_result res;
        assert_int_equal(nd_minimize(t == 1 ? &nd_minimizer_fire : &nd_minimizer_lbfgs, &w, n, x, &o, &res, NULL), ND_OK);
        for (int c = 0; c < 3; c++) {
            assert_true(x[3 + c] == f->mol.xyz[3 + c]);
            assert_true(x[18 + c] == f->mol.xyz[18 + c]);
        }
        assert_true(fabs(x[0] - f->mol.xyz[0]) + fabs(x[6] - f->mol.xyz[6]) > 1e-4); /* others moved */
        nd_precond_free(pc);
        free(x);
        nd_restraints_free(r);
    }
}

/* A relaxed torsion scan of butane's C-C-C-C torsion: a stiff restraint
 * holds each target; the profile of the unrestrained energy is symmetric
 * (phi and -phi are mirror images) with the threefold pattern of the
 * potential's torsion term. (In this invented potential gauche lies below
 * anti, from the 1-4 Lennard-Jones attraction; no outside value is implied.) */
static void test_scan(void **state)
{
    fixture *f = *state;
    int n = f->mol.natoms;
    nd_restraints *r;
    assert_int_equal(nd_restraints_new(&r, &f->pot, n, NULL), ND_OK);
    int idx;
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_TORSION, TORS, 180, 2000, &idx, NULL), ND_OK);
    nd_energy w = nd_restraints_energy(r);
    double *x = malloc(3 * (size_t)n * sizeof *x);
    memcpy(x, f->mol.xyz, 3 * (size_t)n * sizeof *x);
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.stop.max_force = o.stop.rms_force = 0.005;
    double prof[13];
    for (int k = 0; k < 13; k++) {
        double target = -180 + 30 * k;
        assert_int_equal(nd_restraints_set_target(r, idx, target, NULL), ND_OK);
        assert_int_equal(nd_minimize(NULL, &w, n, x, &o, NULL, NULL), ND_OK);
        double v = nd_restraints_value(r, idx, x);
        assert_true(fabs(remainder(v - target, 360.0)) < 1.0);
        f->pot.fn(f->pot.ctx, n, x, &prof[k], NULL);
        print_message("# scan %7.1f  %.5f\n", target, prof[k]);
    }
    for (int k = 1; k < 6; k++)
        assert_close(prof[k], prof[12 - k], 2e-3);
    assert_close(prof[0], prof[12], 2e-3);
    /* threefold pattern: eclipsed 0 and +-120 are local maxima, staggered
     * +-60 and 180 local minima, syn (0) the highest point */
    for (int k = 2; k <= 10; k += 4)
        assert_true(prof[k] > prof[k - 1] && prof[k] > prof[k + 1]);
    for (int k = 4; k <= 8; k += 4)
        assert_true(prof[k] < prof[k - 1] && prof[k] < prof[k + 1]);
    assert_true(prof[0] < prof[1]);
    for (int k = 0; k < 13; k++)
        assert_true(prof[k] <= prof[6]);
    free(x);
    nd_restraints_free(r);
}

/* Targets given outside (-180, 180] wrap: 253.7 degrees is -106.3. */
static void test_wrap(void **state)
{
    fixture *f = *state;
    nd_restraints *r1, *r2;
    assert_int_equal(nd_restraints_new(&r1, &f->pot, f->mol.natoms, NULL), ND_OK);
    assert_int_equal(nd_restraints_new(&r2, &f->pot, f->mol.natoms, NULL), ND_OK);
    assert_int_equal(nd_restraints_add(r1, ND_RESTRAIN_TORSION, TORS, 253.7, 10, NULL, NULL), ND_OK);
    assert_int_equal(nd_restraints_add(r2, ND_RESTRAIN_TORSION, TORS, -106.3, 10, NULL, NULL), ND_OK);
    double g1[3 * 14], g2[3 * 14];
    double p1 = nd_restraints_penalty(r1, f->mol.xyz, g1), p2 = nd_restraints_penalty(r2, f->mol.xyz, g2);
    assert_true(p1 > 0);
    assert_close(p1, p2, 1e-12);
    for (int i = 0; i < 3 * 14; i++)
        assert_close(g1[i], g2[i], 1e-12);
    nd_restraints_free(r1);
    nd_restraints_free(r2);
}

static void test_errors(void **state)
{
    fixture *f = *state;
    int n = f->mol.natoms;
    nd_restraints *r = NULL;
    nd_error err;
    nd_energy nofn = {NULL, NULL, NULL};
    assert_int_equal(nd_restraints_new(NULL, &f->pot, n, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_new(&r, &nofn, n, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_new(&r, NULL, n, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_new(&r, &f->pot, 0, &err), ND_EINVAL);
    assert_null(r);
    assert_int_equal(nd_restraints_new(&r, &f->pot, n, &err), ND_OK);
    assert_int_equal(nd_restraints_freeze(r, n, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_freeze(r, -1, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_freeze(NULL, 0, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_add(r, (nd_restraint_kind)9, TORS, 1, 1, NULL, &err), ND_EINVAL);
    assert_contains(err.msg, "unknown restraint kind");
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_DISTANCE, (const int[]){0, 14}, 1, 1, NULL, &err), ND_EINVAL);
    assert_contains(err.msg, "out of range");
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_ANGLE, (const int[]){0, 1, 0}, 100, 1, NULL, &err), ND_EINVAL);
    assert_contains(err.msg, "appears twice");
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_DISTANCE, DIST, 1.5, -2, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_DISTANCE, DIST, 1.5, INFINITY, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_DISTANCE, DIST, -1.5, 1, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_ANGLE, ANG, 180.5, 1, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_TORSION, TORS, NAN, 1, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_TORSION, NULL, 1, 1, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_add(NULL, ND_RESTRAIN_TORSION, TORS, 1, 1, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_restraints_count(r), 0);
    assert_int_equal(nd_restraints_set_target(r, 0, 1, &err), ND_EINVAL);
    assert_true(isnan(nd_restraints_value(r, 0, f->mol.xyz)));
    assert_int_equal(nd_restraints_add(r, ND_RESTRAIN_ANGLE, ANG, 100, 1, NULL, &err), ND_OK);
    assert_int_equal(nd_restraints_set_target(r, 0, 190, &err), ND_EINVAL);
    /* the wrapper: wrong atom count, and an inner failure passes through */
    nd_energy w = nd_restraints_energy(r);
    double e;
    assert_int_equal(w.fn(w.ctx, n - 1, f->mol.xyz, &e, NULL), ND_EINVAL);
    nd_restraints_free(r);
    nd_test_faulty fl = {f->pot, 1, 3, 0};
    nd_energy fp = {nd_test_faulty_energy, NULL, &fl};
    assert_int_equal(nd_restraints_new(&r, &fp, n, &err), ND_OK);
    w = nd_restraints_energy(r);
    assert_int_equal(w.fn(w.ctx, n, f->mol.xyz, &e, NULL), ND_EDOMAIN);
    nd_restraints_free(r);
    nd_restraints_free(NULL);
    assert_null(nd_restraints_frozen(NULL));
    assert_int_equal(nd_restraints_count(NULL), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_gradient, setup, teardown),
        cmocka_unit_test_setup_teardown(test_targets_hold, setup, teardown),
        cmocka_unit_test_setup_teardown(test_frozen, setup, teardown),
        cmocka_unit_test_setup_teardown(test_scan, setup, teardown),
        cmocka_unit_test_setup_teardown(test_wrap, setup, teardown),
        cmocka_unit_test_setup_teardown(test_errors, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

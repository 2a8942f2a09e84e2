/* FIRE (optimize/fire.c) on analytic potentials with known minima, its step
 * cap, robustness to a too-large time step, and its error path. */
#include "tests/lib/testutil.h"

#include "optimize/minimize.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <string.h>

static nd_minimize_options tight(double force_tol)
{
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.stop.max_force = force_tol;
    o.stop.rms_force = force_tol;
    o.stop.energy_change = 0;
    o.stop.max_steps = 20000;
    return o;
}

/* Cambridge Cluster Database: LJ13 global minimum -44.326801 epsilon. */
static void test_lj13(void **state)
{
    (void)state;
    nd_test_lj lj = {1.0, 1.0};
    nd_energy pot = {nd_test_lj_energy, NULL, &lj};
    double x[39];
    nd_test_lj13_icosahedron(1.0, x);
    nd_test_perturb(13, x, 0.07, 20261201);
    nd_minimize_options o = tight(1e-6);
    nd_minimize_result res;
    nd_error err;
    assert_int_equal(nd_minimize(&nd_minimizer_fire, &pot, 13, x, &o, &res, &err), ND_OK);
    assert_int_equal(res.why, ND_STOP_FORCE);
    assert_close(res.energy, -44.326801, 5e-7);
}

static void test_morse(void **state)
{
    (void)state;
    nd_test_morse m = {109.47, 1.9385, 0.7416};
    nd_energy pot = {nd_test_morse_energy, NULL, &m};
    double x[6] = {0.113, -0.207, 0.331, 1.315, 0.436, -0.148};
    nd_minimize_options o = tight(1e-7);
    nd_minimize_result res;
    assert_int_equal(nd_minimize(&nd_minimizer_fire, &pot, 2, x, &o, &res, NULL), ND_OK);
    double r = sqrt(pow(x[3] - x[0], 2) + pow(x[4] - x[1], 2) + pow(x[5] - x[2], 2));
    assert_close(r, 0.7416, 1e-9);
}

/* Rosenbrock in 2 variables (n = 1, one padding coordinate) reaches (1, 1). */
static void test_rosenbrock(void **state)
{
    (void)state;
    nd_test_rosenbrock rb = {2};
    nd_energy pot = {nd_test_rosenbrock_energy, NULL, &rb};
    double x[3] = {-1.2, 1.0, 0.385};
    nd_minimize_options o = tight(1e-8);
    o.fire_dt = 0.002; /* curvature ~1000 near the valley floor: dt < 2/sqrt(1000) */
    o.fire_dt_max = 0.02;
    nd_minimize_result res;
    assert_int_equal(nd_minimize(&nd_minimizer_fire, &pot, 1, x, &o, &res, NULL), ND_OK);
    for (int i = 0; i < 3; i++)
        assert_close(x[i], 1.0, 1e-7);
}

/* Rosenbrock in 10 variables (n = 4, two padding coordinates). */
static void test_rosenbrock_10(void **state)
{
    (void)state;
    nd_test_rosenbrock rb = {10};
    nd_energy pot = {nd_test_rosenbrock_energy, NULL, &rb};
    double x[12] = {0.213, 0.571, -0.262, 0.813, 0.094, 0.447, 1.385, 0.726, -0.118, 0.652, 2.31, -0.41};
    nd_minimize_options o = tight(1e-8);
    o.fire_dt = 0.002;
    o.fire_dt_max = 0.02;
    o.stop.max_steps = 100000;
    nd_minimize_result res;
    assert_int_equal(nd_minimize(&nd_minimizer_fire, &pot, 4, x, &o, &res, NULL), ND_OK);
    for (int i = 0; i < 12; i++)
        assert_close(x[i], 1.0, 1e-7);
}

/* The step cap holds, and a time step far too large for the stiffness
 * (dt = 0.5 on k = 1210, stable only below 0.058) still converges: the
 * P <= 0 reset halves dt and stops the velocity. */
static void test_cap_and_reset(void **state)
{
    (void)state;
    double k[6] = {0.37, 1.9, 12.5, 85.3, 410.2, 1210.0}, c[6] = {0.2, -0.3, 0.45, 1.1, -0.7, 0.05};
    nd_test_harmonic h = {k, c};
    nd_energy pot = {nd_test_harmonic_energy, NULL, &h};
    double x[6] = {2.31, -1.12, 0.5, 1.02, -0.66, 0.1};
    nd_minimize_options o = tight(1e-6);
    o.fire_dt = 0.5;
    o.fire_dt_max = 5.0;
    o.max_step = 0.173;
    nd_minimizer *m;
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_fire, &pot, 2, x, &o, NULL), ND_OK);
    nd_stop why;
    double prev[6];
    while (nd_minimizer_test(m, &why) == ND_CONTINUE && nd_minimizer_steps(m) < 20000) {
        memcpy(prev, nd_minimizer_x(m), sizeof prev);
        assert_int_equal(nd_minimizer_iterate(m, NULL), ND_OK);
        const double *xn = nd_minimizer_x(m);
        for (int a = 0; a < 2; a++)
            assert_true(sqrt(pow(xn[3 * a] - prev[3 * a], 2) + pow(xn[3 * a + 1] - prev[3 * a + 1], 2) +
                             pow(xn[3 * a + 2] - prev[3 * a + 2], 2)) <= 0.173 * (1 + 1e-12));
    }
    assert_int_equal(why, ND_STOP_FORCE);
    for (int i = 0; i < 6; i++)
        assert_close(nd_minimizer_x(m)[i], c[i], 1e-5);
    assert_int_equal(nd_minimizer_force_calls(m), nd_minimizer_steps(m) + 1); /* one call per step */
    nd_minimizer_free(m);
}

/* A potential failing mid-run stops FIRE with ND_ECOMPUTE. */
static void test_failure(void **state)
{
    (void)state;
    nd_test_lj lj = {1.0, 1.0};
    nd_test_faulty f = {{nd_test_lj_energy, NULL, &lj}, 9, 1, 0};
    nd_energy pot = {nd_test_faulty_energy, NULL, &f};
    double x[39];
    nd_test_lj13_icosahedron(1.0, x);
    nd_test_perturb(13, x, 0.1, 3);
    nd_minimize_result res;
    nd_error err;
    assert_int_equal(nd_minimize(&nd_minimizer_fire, &pot, 13, x, NULL, &res, &err), ND_ECOMPUTE);
    assert_contains(err.msg, "non-finite energy in step 8");
    assert_false(res.converged);
    assert_int_equal(res.steps, 7); /* steps completed before the failing one */
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_lj13),          cmocka_unit_test(test_morse),
        cmocka_unit_test(test_rosenbrock),    cmocka_unit_test(test_rosenbrock_10),
        cmocka_unit_test(test_cap_and_reset), cmocka_unit_test(test_failure),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

/* The minimiser handle, method table and driver (optimize/minimize.c):
 * argument checks, every error path, step limit and stop reasons. */
#include "tests/lib/testutil.h"

#include "optimize/minimize.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <string.h>

static nd_test_lj LJ = {1.0, 1.0};

static void start13(double *x)
{
    nd_test_lj13_icosahedron(1.0, x);
    nd_test_perturb(13, x, 0.09, 99);
}

static void test_table(void **state)
{
    (void)state;
    assert_ptr_equal(nd_minimizer_find("lbfgs"), &nd_minimizer_lbfgs);
    assert_ptr_equal(nd_minimizer_find("fire"), &nd_minimizer_fire);
    assert_null(nd_minimizer_find("newton"));
    assert_null(nd_minimizer_find(NULL));
    assert_ptr_equal(nd_minimizer_type_at(0), &nd_minimizer_lbfgs);
    assert_ptr_equal(nd_minimizer_type_at(1), &nd_minimizer_fire);
    assert_null(nd_minimizer_type_at(2));
    assert_null(nd_minimizer_type_at(-1));
}

static void test_bad_arguments(void **state)
{
    (void)state;
    nd_energy pot = {nd_test_lj_energy, NULL, &LJ};
    double x[39];
    start13(x);
    nd_minimizer *m = (nd_minimizer *)x;
    nd_error err;
    assert_int_equal(nd_minimizer_new(NULL, &nd_minimizer_lbfgs, &pot, 13, x, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_minimizer_new(&m, NULL, &pot, 13, x, NULL, &err), ND_EINVAL);
    assert_null(m);
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, NULL, 13, x, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &pot, 0, x, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &pot, 13, NULL, NULL, &err), ND_EINVAL);
    nd_energy nofn = {NULL, NULL, NULL};
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &nofn, 13, x, NULL, &err), ND_EINVAL);
    /* each bad option in turn */
    for (int k = 0; k < 9; k++) {
        nd_minimize_options o;
        nd_minimize_options_default(&o);
        switch (k) {
        case 0: o.max_step = 0; break;
        case 1: o.memory = 0; break;
        case 2: o.wolfe_c1 = 0; break;
        case 3: o.wolfe_c2 = 0.5e-4; break;
        case 4: o.wolfe_c2 = 1.0; break;
        case 5: o.max_line_calls = 1; break;
        case 6: o.fire_dt = -0.1; break;
        case 7: o.fire_dt_max = 0.01; break;
        default: o.stop.max_steps = -3; break;
        }
        assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_fire, &pot, 13, x, &o, &err), ND_EINVAL);
        assert_contains(err.msg, "bad options");
    }
    /* a preconditioner for another number of atoms */
    int z[2] = {6, 8};
    double y[6] = {0, 0, 0, 1.21, 0.03, 0};
    nd_precond *pc;
    assert_int_equal(nd_precond_new(&pc, 2, z, y, NULL, 0, &err), ND_OK);
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.precond = pc;
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &pot, 13, x, &o, &err), ND_EINVAL);
    assert_contains(err.msg, "for 2 atoms, not 13");
    nd_precond_free(pc);
    assert_int_equal(nd_minimizer_iterate(NULL, &err), ND_EINVAL);
    assert_int_equal(nd_minimize(NULL, &pot, 13, NULL, NULL, NULL, &err), ND_EINVAL);
    nd_minimizer_free(NULL);
}

/* Failures of the potential: at the start point and in a later step, for
 * each kind (error code, NaN energy, NaN gradient, an input-type code that
 * must pass through unchanged). */
static void test_potential_failures(void **state)
{
    (void)state;
    static const struct {
        int fail_at, mode, code;
        const char *msg;
    } cases[] = {
        {1, 0, ND_ECOMPUTE, "the potential failed at the start point (computation failed)"},
        {1, 1, ND_ECOMPUTE, "non-finite energy at the start point"},
        {1, 2, ND_ECOMPUTE, "non-finite gradient at the start point, atom 2"},
        {1, 3, ND_EDOMAIN, "the potential failed at the start point"},
        {5, 0, ND_ECOMPUTE, "the potential failed in step"},
        {5, 1, ND_ECOMPUTE, "non-finite energy in step"},
        {5, 2, ND_ECOMPUTE, "non-finite gradient in step"},
        {5, 3, ND_EDOMAIN, "the potential failed in step"},
    };
    for (int t = 0; t < 2; t++)
        for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
            nd_test_faulty f = {{nd_test_lj_energy, NULL, &LJ}, cases[k].fail_at, cases[k].mode, 0};
            nd_energy pot = {nd_test_faulty_energy, NULL, &f};
            double x[39];
            start13(x);
            nd_minimize_result res;
            nd_error err;
            int s = nd_minimize(nd_minimizer_type_at(t), &pot, 13, x, NULL, &res, &err);
            assert_int_equal(s, cases[k].code);
            assert_int_equal(err.code, cases[k].code);
            assert_contains(err.msg, cases[k].msg);
            assert_false(res.converged);
        }
}

static void test_step_limit(void **state)
{
    (void)state;
    nd_energy pot = {nd_test_lj_energy, NULL, &LJ};
    double x[39], x0[39];
    start13(x);
    memcpy(x0, x, sizeof x);
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.stop.max_steps = 4;
    for (int t = 0; t < 2; t++) {
        memcpy(x, x0, sizeof x);
        nd_minimize_result res;
        nd_error err;
        assert_int_equal(nd_minimize(nd_minimizer_type_at(t), &pot, 13, x, &o, &res, &err), ND_CONTINUE);
        assert_false(res.converged);
        assert_int_equal(res.why, ND_STOP_STEPS);
        assert_int_equal(res.steps, 4);
        assert_contains(err.msg, "not converged: step limit of 4 reached");
        assert_true(res.max_force > o.stop.max_force);
        /* x holds the point reached, with the reported energy */
        double e;
        nd_test_lj_energy(&LJ, 13, x, &e, NULL);
        assert_true(e == res.energy);
    }
}

/* The energy criterion stops a run when forces are under the loose cap
 * and the change is tiny; the result says so. */
static void test_energy_stop(void **state)
{
    (void)state;
    nd_energy pot = {nd_test_lj_energy, NULL, &LJ};
    double x[39];
    start13(x);
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.stop.max_force = 1e-12; /* unreachable */
    o.stop.rms_force = 1e-12;
    o.stop.energy_change = 1e-5;
    o.stop.energy_max_force = 0.05;
    nd_minimize_result res;
    assert_int_equal(nd_minimize(NULL, &pot, 13, x, &o, &res, NULL), ND_OK);
    assert_true(res.converged);
    assert_int_equal(res.why, ND_STOP_ENERGY);
    assert_true(res.energy_change <= 1e-5);
    assert_true(res.max_force <= 0.05);
}

/* Accessors follow the run; force calls count every evaluation. */
static void test_accessors(void **state)
{
    (void)state;
    nd_test_faulty f = {{nd_test_lj_energy, NULL, &LJ}, -1, 0, 0}; /* never fails: a call counter */
    nd_energy pot = {nd_test_faulty_energy, NULL, &f};
    double x[39];
    start13(x);
    nd_minimizer *m;
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &pot, 13, x, NULL, NULL), ND_OK);
    assert_string_equal(nd_minimizer_name(m), "lbfgs");
    assert_int_equal(nd_minimizer_steps(m), 0);
    assert_int_equal(nd_minimizer_force_calls(m), 1);
    assert_true(nd_minimizer_energy_change(m) == 0);
    double e0 = nd_minimizer_energy(m);
    assert_int_equal(nd_minimizer_iterate(m, NULL), ND_OK);
    assert_int_equal(nd_minimizer_steps(m), 1);
    assert_int_equal(nd_minimizer_force_calls(m), f.calls);
    assert_close(nd_minimizer_energy_change(m), fabs(e0 - nd_minimizer_energy(m)), 1e-15);
    double e, g[39];
    nd_test_lj_energy(&LJ, 13, nd_minimizer_x(m), &e, g);
    assert_true(e == nd_minimizer_energy(m));
    for (int i = 0; i < 39; i++)
        assert_true(g[i] == nd_minimizer_gradient(m)[i]);
    assert_false(nd_minimizer_stalled(m));
    nd_minimizer_free(m);
    /* default method and options, no result record */
    start13(x);
    assert_int_equal(nd_minimize(NULL, &pot, 13, x, NULL, NULL, NULL), ND_OK);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_table),      cmocka_unit_test(test_bad_arguments),
        cmocka_unit_test(test_potential_failures), cmocka_unit_test(test_step_limit),
        cmocka_unit_test(test_energy_stop), cmocka_unit_test(test_accessors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

/* L-BFGS (optimize/lbfgs.c) on analytic potentials with known minima, its
 * step cap, restarts and stalls, and against scipy.optimize's L-BFGS-B. */
#include "tests/lib/testutil.h"

#include "optimize/minimize.h"
#include "tests/lib/analytic.h"
#include "tests/lib/scipy_bridge.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

static nd_minimize_options tight(double force_tol)
{
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.stop.max_force = force_tol;
    o.stop.rms_force = force_tol;
    o.stop.energy_change = 0; /* force criterion only */
    o.stop.max_steps = 5000;
    return o;
}

/* Cambridge Cluster Database (Wales & Doye, J. Phys. Chem. A 101, 5111,
 * 1997): LJ13 global minimum -44.326801 epsilon, the Mackay icosahedron. */
static const double LJ13_MIN = -44.326801;

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
    assert_int_equal(nd_minimize(&nd_minimizer_lbfgs, &pot, 13, x, &o, &res, &err), ND_OK);
    assert_true(res.converged);
    assert_int_equal(res.why, ND_STOP_FORCE);
    assert_true(res.max_force <= 1e-6);
    assert_close(res.energy, LJ13_MIN, 5e-7);
    double e, g[39];
    nd_test_lj_energy(&lj, 13, x, &e, g);
    assert_true(e == res.energy);
}

/* Rosenbrock minimum (1, ..., 1), E = 0 (H. H. Rosenbrock, Comput. J. 3,
 * 175, 1960); 2 variables on one "atom" (one padding coordinate), 10 on
 * four (two padding coordinates), see tests/lib/analytic.h. */
static void rosenbrock(int dim, int n, const double *start)
{
    nd_test_rosenbrock rb = {dim};
    nd_energy pot = {nd_test_rosenbrock_energy, NULL, &rb};
    double x[12];
    memcpy(x, start, 3 * (size_t)n * sizeof *x);
    nd_minimize_options o = tight(1e-9);
    o.max_step = 0.5;
    nd_minimize_result res;
    nd_error err;
    assert_int_equal(nd_minimize(NULL, &pot, n, x, &o, &res, &err), ND_OK);
    for (int i = 0; i < 3 * n; i++)
        assert_close(x[i], 1.0, 1e-8);
    assert_true(res.energy < 1e-16);
}

static void test_rosenbrock_2(void **state)
{
    (void)state;
    const double start[3] = {-1.2, 1.0, 0.385}; /* Rosenbrock's classic start */
    rosenbrock(2, 1, start);
}

static void test_rosenbrock_10(void **state)
{
    (void)state;
    /* unround start in the basin of the global minimum; the 10-variable
     * function also has a local minimum near x_1 = -1 */
    const double start[12] = {0.213, 0.571, -0.262, 0.813, 0.094, 0.447,
                              1.385, 0.726, -0.118, 0.652, 2.31, -0.41};
    rosenbrock(10, 4, start);
}

/* A Morse diatomic reaches r_e (by construction of the potential). */
static void test_morse(void **state)
{
    (void)state;
    nd_test_morse m = {109.47, 1.9385, 0.7416};
    nd_energy pot = {nd_test_morse_energy, NULL, &m};
    double x[6] = {0.113, -0.207, 0.331, 0.815, 0.436, -0.148};
    nd_minimize_options o = tight(1e-7);
    nd_minimize_result res;
    assert_int_equal(nd_minimize(&nd_minimizer_lbfgs, &pot, 2, x, &o, &res, NULL), ND_OK);
    double r = sqrt((x[3] - x[0]) * (x[3] - x[0]) + (x[4] - x[1]) * (x[4] - x[1]) + (x[5] - x[2]) * (x[5] - x[2]));
    assert_close(r, 0.7416, 1e-9);
    assert_true(res.energy < 1e-14);
}

/* Ill-conditioned separable well, stiffness from 0.37 to 1210 (condition
 * number 3270): the minimum is the centre. */
static void test_harmonic(void **state)
{
    (void)state;
    double k[12], c[12], x[12];
    for (int i = 0; i < 12; i++) {
        k[i] = 0.37 * pow(3270.0, i / 11.0);
        c[i] = 0.5 * sin(1.7 * i + 0.3);
        x[i] = c[i] + 0.31 * cos(2.3 * i);
    }
    nd_test_harmonic h = {k, c};
    nd_energy pot = {nd_test_harmonic_energy, NULL, &h};
    nd_minimize_options o = tight(1e-8);
    nd_minimize_result res;
    assert_int_equal(nd_minimize(&nd_minimizer_lbfgs, &pot, 4, x, &o, &res, NULL), ND_OK);
    for (int i = 0; i < 12; i++)
        assert_close(x[i], c[i], 1e-8 / k[i] * 2);
}

/* No atom moves more than max_step in one step. */
static void test_step_cap(void **state)
{
    (void)state;
    nd_test_morse m = {109.47, 1.9385, 0.7416};
    nd_energy pot = {nd_test_morse_energy, NULL, &m};
    double x[6] = {0.0, 0.0, 0.0, 3.35, 0.21, 0.0};
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.max_step = 0.137;
    nd_minimizer *mz;
    assert_int_equal(nd_minimizer_new(&mz, &nd_minimizer_lbfgs, &pot, 2, x, &o, NULL), ND_OK);
    double prev[6];
    int capped = 0;
    for (int it = 0; it < 12; it++) {
        memcpy(prev, nd_minimizer_x(mz), sizeof prev);
        assert_int_equal(nd_minimizer_iterate(mz, NULL), ND_OK);
        const double *xn = nd_minimizer_x(mz);
        for (int a = 0; a < 2; a++) {
            double d = sqrt(pow(xn[3 * a] - prev[3 * a], 2) + pow(xn[3 * a + 1] - prev[3 * a + 1], 2) +
                            pow(xn[3 * a + 2] - prev[3 * a + 2], 2));
            assert_true(d <= 0.137 * (1 + 1e-12));
            if (d > 0.137 * 0.999)
                capped = 1;
        }
        assert_true(nd_minimizer_energy(mz) <= nd_minimizer_energy(mz) + 0); /* finite */
    }
    assert_true(capped); /* far from r_e the cap was reached */
    nd_minimizer_free(mz);
}

/* The energy never rises between accepted L-BFGS points (sufficient
 * decrease), on LJ13 from a rough start. */
static void test_monotone(void **state)
{
    (void)state;
    nd_test_lj lj = {1.0, 1.0};
    nd_energy pot = {nd_test_lj_energy, NULL, &lj};
    double x[39];
    nd_test_lj13_icosahedron(1.0, x);
    nd_test_perturb(13, x, 0.12, 77);
    nd_minimizer *mz;
    assert_int_equal(nd_minimizer_new(&mz, &nd_minimizer_lbfgs, &pot, 13, x, NULL, NULL), ND_OK);
    double e = nd_minimizer_energy(mz);
    nd_stop why;
    while (nd_minimizer_test(mz, &why) == ND_CONTINUE && nd_minimizer_steps(mz) < 500) {
        assert_int_equal(nd_minimizer_iterate(mz, NULL), ND_OK);
        assert_true(nd_minimizer_energy(mz) < e);
        e = nd_minimizer_energy(mz);
    }
    assert_int_equal(why, ND_STOP_FORCE);
    nd_minimizer_free(mz);
}

/* A gradient that contradicts the energy (sign flipped after 6 calls)
 * makes the line search fail: the memory is dropped, the steepest-descent
 * restart fails too, and the run reports a stall, not a minimum. */
static void test_stall(void **state)
{
    (void)state;
    nd_test_lj lj = {1.0, 1.0};
    nd_test_faulty f = {{nd_test_lj_energy, NULL, &lj}, 6, 4, 0};
    nd_energy pot = {nd_test_faulty_energy, NULL, &f};
    double x[39];
    nd_test_lj13_icosahedron(1.0, x);
    nd_test_perturb(13, x, 0.1, 5);
    nd_minimize_result res;
    nd_error err;
    assert_int_equal(nd_minimize(&nd_minimizer_lbfgs, &pot, 13, x, NULL, &res, &err), ND_CONTINUE);
    assert_false(res.converged);
    assert_int_equal(res.why, ND_STOP_STALLED);
    assert_contains(err.msg, "not converged");
    assert_contains(err.msg, "stalled");
    assert_true(res.steps >= 1);
}

/* Line-search branches: on a shallow well the first step is far too short
 * for the curvature condition, so the search extrapolates (the step ends
 * longer than the plain gradient step); on a stiff well the capped first
 * trial overshoots and the zoom phase brackets the minimum. */
static void test_line_search(void **state)
{
    (void)state;
    double k[3] = {0.0137, 0.0137, 0.0137}, c[3] = {0.35, -0.2, 0.15}, x[3] = {1.75, 0.9, -0.6};
    nd_test_harmonic h = {k, c};
    nd_energy pot = {nd_test_harmonic_energy, NULL, &h};
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.max_step = 5.0;
    nd_minimizer *m;
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &pot, 1, x, &o, NULL), ND_OK);
    double g0 = sqrt(pow(nd_minimizer_gradient(m)[0], 2) + pow(nd_minimizer_gradient(m)[1], 2) +
                     pow(nd_minimizer_gradient(m)[2], 2));
    assert_int_equal(nd_minimizer_iterate(m, NULL), ND_OK);
    const double *x1 = nd_minimizer_x(m);
    double moved = sqrt(pow(x1[0] - x[0], 2) + pow(x1[1] - x[1], 2) + pow(x1[2] - x[2], 2));
    assert_true(moved > 2 * g0);                  /* extrapolated past alpha = 1 */
    assert_true(nd_minimizer_force_calls(m) >= 3); /* start + at least two trials */
    nd_minimizer_free(m);
    /* stiff well: the first trial (capped at 0.2 A) overshoots; zoom */
    double ks[3] = {1210.0, 1210.0, 1210.0}, xs[3] = {0.36, -0.2, 0.15};
    nd_test_harmonic hs = {ks, c};
    nd_energy ps = {nd_test_harmonic_energy, NULL, &hs};
    nd_minimize_options_default(&o);
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &ps, 1, xs, &o, NULL), ND_OK);
    double e0 = nd_minimizer_energy(m);
    assert_int_equal(nd_minimizer_iterate(m, NULL), ND_OK);
    assert_true(nd_minimizer_energy(m) < e0);
    assert_true(nd_minimizer_force_calls(m) >= 3);
    nd_minimizer_free(m);
    /* the same, with the potential failing on the zoom's first trial */
    nd_test_faulty f = {ps, 3, 0, 0};
    nd_energy pf = {nd_test_faulty_energy, NULL, &f};
    nd_error err;
    assert_int_equal(nd_minimizer_new(&m, &nd_minimizer_lbfgs, &pf, 1, xs, &o, NULL), ND_OK);
    assert_int_equal(nd_minimizer_iterate(m, &err), ND_ECOMPUTE);
    assert_contains(err.msg, "the potential failed in step 1");
    assert_false(nd_minimizer_stalled(m));
    assert_int_equal(nd_minimizer_steps(m), 0);
    assert_true(nd_minimizer_x(m)[0] == xs[0]); /* the last accepted point is kept */
    nd_minimizer_free(m);
}

/* A strict curvature constant makes the zoom phase shrink its bracket from
 * the low end (points with sufficient decrease but too steep a slope), and
 * a small budget makes it stop early with the best such point; on the
 * anharmonic Morse well, from a compressed start whose capped first trial
 * overshoots, both still reach r_e. */
static void test_zoom(void **state)
{
    (void)state;
    nd_test_morse mo = {109.47, 1.9385, 0.7416};
    nd_energy pot = {nd_test_morse_energy, NULL, &mo};
    for (int budget = 20; budget >= 3; budget -= 17) {
        double x[6] = {0.0, 0.0, 0.0, 0.571, 0.123, -0.087};
        nd_minimize_options o = tight(1e-7);
        o.wolfe_c2 = budget == 20 ? 0.01 : 2e-4;
        o.max_line_calls = budget;
        nd_minimize_result res;
        assert_int_equal(nd_minimize(NULL, &pot, 2, x, &o, &res, NULL), ND_OK);
        double r = sqrt(pow(x[3] - x[0], 2) + pow(x[4] - x[1], 2) + pow(x[5] - x[2], 2));
        assert_close(r, 0.7416, 1e-9);
    }
}

/* A budget of two calls per line search: searches that run out return the
 * lowest point with sufficient decrease, and the run still converges. */
static void test_line_budget(void **state)
{
    (void)state;
    nd_test_rosenbrock rb = {2};
    nd_energy pot = {nd_test_rosenbrock_energy, NULL, &rb};
    double x[3] = {-1.2, 1.0, 0.385};
    nd_minimize_options o = tight(1e-7);
    o.max_line_calls = 2;
    o.max_step = 0.5;
    nd_minimize_result res;
    assert_int_equal(nd_minimize(NULL, &pot, 1, x, &o, &res, NULL), ND_OK);
    for (int i = 0; i < 3; i++)
        assert_close(x[i], 1.0, 1e-6);
}

/* At an exact stationary point with tolerances that cannot be met there is
 * no downhill direction: a stall, not a step. */
static void test_no_direction(void **state)
{
    (void)state;
    double k[3] = {2.5, 3.5, 4.5}, c[3] = {0.35, -0.2, 0.15};
    nd_test_harmonic h = {k, c};
    nd_energy pot = {nd_test_harmonic_energy, NULL, &h};
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    o.stop.max_force = 0;
    o.stop.energy_change = 0;
    nd_minimize_result res;
    nd_error err;
    double x[3] = {0.35, -0.2, 0.15};
    assert_int_equal(nd_minimize(NULL, &pot, 1, x, &o, &res, &err), ND_CONTINUE);
    assert_int_equal(res.why, ND_STOP_STALLED);
    assert_int_equal(res.steps, 0);
    assert_contains(err.msg, "no downhill direction");
}

/* Our L-BFGS against scipy.optimize.minimize(method="L-BFGS-B") from
 * Debian's python3-scipy 1.10, run from the same start on the same C
 * function to the same largest-force tolerance: the same minimum energy
 * within 1e-8, force calls printed side by side. */
static void compare(const char *name, const nd_energy *pot, int n, const double *x0, double force_tol,
                    double max_step)
{
    double xa[3 * 64], xb[3 * 64];
    memcpy(xa, x0, 3 * (size_t)n * sizeof *xa);
    memcpy(xb, x0, 3 * (size_t)n * sizeof *xb);
    nd_minimize_options o = tight(force_tol);
    o.stop.rms_force = 1e30; /* largest force only, as scipy's side is stopped */
    o.max_step = max_step;
    nd_minimize_result res;
    assert_int_equal(nd_minimize(&nd_minimizer_lbfgs, pot, n, xa, &o, &res, NULL), ND_OK);
    nd_test_scipy_result sp;
    assert_int_equal(nd_test_scipy_lbfgsb(pot, n, xb, force_tol, 10, 10000, &sp), 0);
    assert_true(sp.converged);
    assert_close(res.energy, sp.energy, 1e-8);
    printf("# %-22s nadir L-BFGS %4d force calls, scipy L-BFGS-B %4d (E %.10f vs %.10f)\n", name,
           res.force_calls, sp.force_calls, res.energy, sp.energy);
}

static void test_scipy(void **state)
{
    (void)state;
    if (!nd_test_scipy_available())
        skip();
    nd_test_lj lj = {1.0, 1.0};
    nd_energy plj = {nd_test_lj_energy, NULL, &lj};
    double x[39];
    nd_test_lj13_icosahedron(1.0, x);
    nd_test_perturb(13, x, 0.07, 20261201);
    compare("LJ13", &plj, 13, x, 1e-6, 0.2);
    nd_test_rosenbrock r2 = {2};
    nd_energy pr2 = {nd_test_rosenbrock_energy, NULL, &r2};
    const double s2[3] = {-1.2, 1.0, 0.385};
    compare("Rosenbrock 2", &pr2, 1, s2, 1e-7, 0.5);
    nd_test_rosenbrock r10 = {10};
    nd_energy pr10 = {nd_test_rosenbrock_energy, NULL, &r10};
    const double s10[12] = {0.213, 0.571, -0.262, 0.813, 0.094, 0.447,
                            1.385, 0.726, -0.118, 0.652, 2.31, -0.41};
    compare("Rosenbrock 10", &pr10, 4, s10, 1e-7, 0.5);
    nd_test_morse m = {109.47, 1.9385, 0.7416};
    nd_energy pm = {nd_test_morse_energy, NULL, &m};
    const double sm[6] = {0.113, -0.207, 0.331, 0.815, 0.436, -0.148};
    compare("Morse diatomic", &pm, 2, sm, 1e-7, 0.2);
    /* butane with the bonded test potential, from a perturbed start */
    nd_molecule mol;
    nd_molecule_init(&mol);
    assert_int_equal(nd_test_molecule_build(2, &mol, NULL), ND_OK);
    nd_test_perturb(mol.natoms, mol.xyz, 0.1, 2718);
    nd_test_bonded *b;
    assert_int_equal(nd_test_bonded_new(&b, &mol, NULL), ND_OK);
    nd_energy pb = {nd_test_bonded_energy, NULL, b};
    compare("butane (bonded)", &pb, mol.natoms, mol.xyz, 1e-5, 0.2);
    nd_test_bonded_free(b);
    nd_molecule_free(&mol);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_lj13),      cmocka_unit_test(test_rosenbrock_2),
        cmocka_unit_test(test_rosenbrock_10), cmocka_unit_test(test_morse),
        cmocka_unit_test(test_harmonic),  cmocka_unit_test(test_step_cap),
        cmocka_unit_test(test_monotone),  cmocka_unit_test(test_stall),
        cmocka_unit_test(test_line_search), cmocka_unit_test(test_line_budget),
        cmocka_unit_test(test_no_direction), cmocka_unit_test(test_zoom),
        cmocka_unit_test(test_scipy),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

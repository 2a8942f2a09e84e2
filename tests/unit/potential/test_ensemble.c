/* Ensemble spreads against numpy, and per-member results through the
 * ensemble helpers. */
#include "tests/lib/testutil.h"

#include "potential/ensemble.h"

#include <math.h>
#include <string.h>

/* Reference values from the Python 3.11.7 standard library (statistics):
 *   statistics.mean([-12.5, -11.75, -13.125, -12.0])   = -12.34375
 *   statistics.stdev([-12.5, -11.75, -13.125, -12.0])  = 0.6070334285138944
 *   a - b = [-2.5, -2.25, -2.625, -2.0] for b = [-10, -9.5, -10.5, -10]
 *   statistics.stdev(a - b)                            = 0.27716947282604315 */
static void test_stats(void **state)
{
    (void)state;
    double a[4] = {-12.5, -11.75, -13.125, -12.0}, b[4] = {-10, -9.5, -10.5, -10}, mean, sd;
    nd_ensemble_stats(4, a, &mean, &sd);
    assert_close(mean, -12.34375, 1e-14);
    assert_close(sd, 0.6070334285138944, 1e-14);
    double dm;
    assert_close(nd_ensemble_difference_spread(4, a, b, &dm), 0.27716947282604315, 1e-14);
    assert_close(dm, -2.34375, 1e-14);
    nd_ensemble_stats(1, a, &mean, &sd);
    assert_true(mean == -12.5 && sd == 0);
    /* force spread: two members, atom 1 differs by (0.3, 0, 0.4) -> per
     * component variance d^2/2, root of the sum = 0.5 / sqrt(2) */
    double g[2 * 6] = {0, 0, 0, 1, 2, 3, 0, 0, 0, 1.3, 2, 3.4};
    assert_close(nd_ensemble_force_spread(2, 2, g), 0.5 / sqrt(2.0), 1e-12);
}

static void test_members(void **state)
{
    (void)state;
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.hidden[0] = 8;
    s.hidden[1] = 6;
    s.members = 4;
    nd_model *m;
    assert_int_equal(nd_model_new(&m, &s, 9, NULL), ND_OK);
    int z[3] = {8, 1, 1};
    double x[2 * 9] = {0, 0, 0, 0.96, 0, 0, -0.24, 0.93, 0, 0, 0, 0, 0.99, 0, 0, -0.3, 0.9, 0.1};
    nd_potential *p;
    assert_int_equal(nd_potential_new(&p, m, 3, z, 2, NULL), ND_OK);
    double e[2 * 4], g[2 * 4 * 9], emean[2];
    assert_int_equal(nd_ensemble_members(p, 2, x, e, g, NULL), ND_OK);
    nd_potential *pm;
    assert_int_equal(nd_potential_new(&pm, m, 3, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
    assert_int_equal(nd_potential_compute(pm, 2, x, emean, NULL, NULL, NULL, NULL), ND_OK);
    for (int st = 0; st < 2; st++) {
        double mu;
        nd_ensemble_stats(4, e + 4 * st, &mu, NULL);
        assert_close(mu, emean[st], 1e-12 * fabs(mu));
    }
    /* the member gradient of structure 2 equals a single-structure call */
    double g1[4 * 9];
    assert_int_equal(nd_ensemble_members(p, 1, x + 9, NULL, g1, NULL), ND_OK);
    for (int i = 0; i < 4 * 9; i++)
        assert_close(g1[i], g[4 * 9 + i], 1e-12);
    nd_potential_free(p);
    nd_potential_free(pm);
    nd_model_free(m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_stats),
        cmocka_unit_test(test_members),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

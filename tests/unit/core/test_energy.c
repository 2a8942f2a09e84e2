/* nd_energy_batch falls back to per-structure calls and reports errors. */
#include "tests/lib/testutil.h"

#include "core/energy.h"
#include "core/status.h"

#include <math.h>

/* Harmonic well E = sum (x - 1.5)^2 ; fails when the first coordinate is negative. */
static int harmonic(void *ctx, int n, const double *x, double *e, double *g)
{
    (void)ctx;
    if (x[0] < 0)
        return ND_ECOMPUTE;
    double s = 0;
    for (int i = 0; i < 3 * n; i++) {
        s += (x[i] - 1.5) * (x[i] - 1.5);
        if (g)
            g[i] = 2 * (x[i] - 1.5);
    }
    *e = s;
    return ND_OK;
}

static void test_batch_fallback(void **state)
{
    (void)state;
    nd_energy pot = {harmonic, NULL, NULL};
    double x[4 * 6], e[4], g[4 * 6];
    for (int i = 0; i < 24; i++)
        x[i] = 0.25 * i;
    assert_int_equal(nd_energy_batch(&pot, 2, 4, x, e, g), ND_OK);
    for (int k = 0; k < 4; k++) {
        double ek, gk[6];
        harmonic(NULL, 2, x + 6 * k, &ek, gk);
        assert_true(ek == e[k]);
        for (int i = 0; i < 6; i++)
            assert_true(gk[i] == g[6 * k + i]);
    }
    x[12] = -1;
    assert_int_equal(nd_energy_batch(&pot, 2, 4, x, e, NULL), ND_ECOMPUTE);
}

int main(void)
{
    const struct CMUnitTest tests[] = {cmocka_unit_test(test_batch_fallback)};
    return cmocka_run_group_tests(tests, NULL, NULL);
}

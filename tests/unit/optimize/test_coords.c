/* Internal coordinates (optimize/coords.c): known values and exact
 * gradients (central finite differences), and the degenerate cases. */
#include "tests/lib/testutil.h"

#include "optimize/coords.h"

#include <math.h>
#include <string.h>

/* FD of coordinate q (0 distance, 1 angle, 2 torsion) over the atoms. */
static double fd_error(int q, const double *x0)
{
    double x[12], d[12], h = 1e-6, worst = 0;
    memcpy(x, x0, sizeof x);
    int ok, na = q + 2;
    if (q == 0)
        nd_coords_distance(x, x + 3, d);
    else if (q == 1)
        nd_coords_angle(x, x + 3, x + 6, d, &ok);
    else
        nd_coords_torsion(x, x + 3, x + 6, x + 9, d, &ok);
    for (int i = 0; i < 3 * na; i++) {
        double v[2];
        for (int s = 0; s < 2; s++) {
            x[i] = x0[i] + (s ? -h : h);
            v[s] = q == 0 ? nd_coords_distance(x, x + 3, NULL)
                   : q == 1 ? nd_coords_angle(x, x + 3, x + 6, NULL, NULL)
                            : nd_coords_torsion(x, x + 3, x + 6, x + 9, NULL, NULL);
        }
        x[i] = x0[i];
        double e = fabs((v[0] - v[1]) / (2 * h) - d[i]);
        if (e > worst)
            worst = e;
    }
    return worst;
}

static void test_values(void **state)
{
    (void)state;
    double i[3] = {1.25, 0, 0}, j[3] = {0, 0, 0}, k[3] = {0, 0, 1.53};
    double d[12];
    int ok;
    assert_close(nd_coords_distance(j, k, d), 1.53, 1e-15);
    assert_close(d[5], 1.0, 1e-15);
    assert_close(d[2], -1.0, 1e-15);
    assert_close(nd_coords_angle(i, j, k, d, &ok), M_PI / 2, 1e-15);
    assert_true(ok);
    /* IUPAC: seen along j -> k, i turned clockwise onto l is positive; with
     * l at angle t about +z (counterclockwise from above) that is +t. */
    for (double t = -2.95; t < 3.1; t += 0.37) {
        double l[3] = {0.9 * cos(t), 0.9 * sin(t), 1.53 + 0.4};
        assert_close(nd_coords_torsion(i, j, k, l, d, &ok), t, 1e-13);
        assert_true(ok);
    }
    /* collinear and degenerate cases: gradient undefined, reported */
    double c[3] = {0, 0, -2.1}, z[3] = {0, 0, 0};
    nd_coords_angle(c, j, k, d, &ok);
    assert_false(ok);
    for (int a = 0; a < 9; a++)
        assert_true(d[a] == 0);
    nd_coords_angle(z, j, k, d, &ok);
    assert_false(ok);
    double l[3] = {0.7, 0.2, 1.9};
    nd_coords_torsion(c, j, k, l, d, &ok);
    assert_false(ok);
    for (int a = 0; a < 12; a++)
        assert_true(d[a] == 0);
    nd_coords_distance(j, z, d);
    for (int a = 0; a < 6; a++)
        assert_true(d[a] == 0);
}

static void test_gradients(void **state)
{
    (void)state;
    const double x[12] = {0.113, 1.207, -0.331, 0.0415, -0.08, 0.26, 1.422, 0.118, 0.493, 1.817, 1.06, -0.27};
    assert_true(fd_error(0, x) < 1e-8);
    assert_true(fd_error(1, x) < 1e-8);
    assert_true(fd_error(2, x) < 1e-7);
    /* a torsion near 180 degrees (atan2 branch) */
    const double y[12] = {1.1, 0.05, 0, 0, 0, 0, 0, 0, 1.5, -1.05, -0.02, 1.9};
    assert_true(fd_error(2, y) < 1e-7);
}

int main(void)
{
    const struct CMUnitTest tests[] = {cmocka_unit_test(test_values), cmocka_unit_test(test_gradients)};
    return cmocka_run_group_tests(tests, NULL, NULL);
}

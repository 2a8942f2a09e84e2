/* Ranking: Boltzmann weights, selection, ensemble spread of relative energies. */
#include "tests/lib/testutil.h"

#include "conformers/rank.h"
#include "core/units.h"

#include <math.h>

/* Two states separated by RT ln 2 have populations 2/3 and 1/3 (Boltzmann
 * distribution, exact). At 298.15 K, 1 kcal/mol gives a ratio of
 * exp(-1/(R T)) = 0.184925 with R = 1.98720425864e-3 kcal/(mol K) (CODATA
 * 2018 R = 8.314462618 J/(mol K) over 4184 J/kcal). */
static void test_boltzmann(void **state)
{
    (void)state;
    double t = 298.15, rt = ND_BOLTZMANN_KCALMOL * t;
    double e[2] = {-1250.75, -1250.75 + rt * log(2.0)}, w[2];
    assert_int_equal(nd_rank_boltzmann(2, e, t, w, NULL), ND_OK);
    assert_close(w[0], 2.0 / 3.0, 1e-14);
    assert_close(w[1], 1.0 / 3.0, 1e-14);
    double e2[3] = {3.0, 2.0, 10000.0}, w2[3];
    assert_int_equal(nd_rank_boltzmann(3, e2, t, w2, NULL), ND_OK);
    assert_close(w2[0] / w2[1], 0.184925, 1e-6);
    assert_true(w2[2] == 0.0 && isfinite(w2[1]));
    double e3[3] = {1.0, 0.5, 0.5}, w3[3];
    assert_int_equal(nd_rank_boltzmann(3, e3, 0.0, w3, NULL), ND_OK);
    assert_true(w3[0] == 0.0 && w3[1] == 0.5 && w3[2] == 0.5);
    nd_error err;
    e3[1] = NAN;
    assert_int_equal(nd_rank_boltzmann(3, e3, t, w3, &err), ND_EINVAL);
    assert_contains(err.msg, "state 2");
    assert_int_equal(nd_rank_boltzmann(0, e3, t, w3, &err), ND_EINVAL);
}

static void test_select(void **state)
{
    (void)state;
    double key[6] = {4.5, 0.25, 3.0, 0.25, 9.5, 1.75};
    int keep[6];
    int m = nd_rank_select(6, key, 3.0, 0, keep);
    assert_int_equal(m, 4);
    assert_int_equal(keep[0], 1); /* tie broken by index */
    assert_int_equal(keep[1], 3);
    assert_int_equal(keep[2], 5);
    assert_int_equal(keep[3], 2);
    assert_int_equal(nd_rank_select(6, key, -1.0, 2, keep), 2);
    assert_int_equal(nd_rank_select(6, key, -1.0, 0, keep), 6);
    assert_int_equal(keep[5], 4);
    assert_int_equal(nd_rank_select(0, key, 1.0, 1, keep), 0);
}

/* Members that agree on relative energies but disagree on the absolute
 * offset give zero spread; independent disagreement gives the sample
 * standard deviation. */
static void test_spread(void **state)
{
    (void)state;
    double me[3 * 4] = {
        -10.0, -11.0, -9.5, -10.5, /* conformer 0 */
        -8.0, -9.0, -7.5, -8.5,    /* conformer 1: +2 in every member */
        -9.0, -9.0, -9.0, -9.0,    /* conformer 2 */
    };
    double s[3];
    nd_rank_relative_spread(3, 4, me, 0, s);
    assert_true(s[0] == 0.0);
    assert_close(s[1], 0.0, 1e-12);
    /* differences 1, 2, 0.5, 1.5: mean 1.25, sample sd sqrt(1.25/3) */
    assert_close(s[2], sqrt(1.25 / 3.0), 1e-12);
    nd_rank_relative_spread(3, 1, me, 0, s);
    assert_true(s[2] == 0.0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {cmocka_unit_test(test_boltzmann), cmocka_unit_test(test_select),
                                       cmocka_unit_test(test_spread)};
    return cmocka_run_group_tests(tests, NULL, NULL);
}

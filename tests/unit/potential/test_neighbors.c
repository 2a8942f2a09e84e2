/* Cell-list neighbour search against brute force, from 1 atom upwards, for
 * batches, sparse systems, and the reverse-pair index. */
#include "tests/lib/testutil.h"

#include "core/rng.h"
#include "potential/neighbors.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static int cmp_int(const void *a, const void *b)
{
    return *(const int *)a - *(const int *)b;
}

/* Compares nb with the O(n^2) search for every structure of the batch:
 * the same neighbour set for every atom, no duplicates. */
static void check_brute(const nd_neighbors *nb, int ns, int n, const double *x, double rc)
{
    assert_int_equal(nb->natoms, ns * n);
    int *sorted = malloc(sizeof(int) * (size_t)(nb->maxnn + 1));
    for (int s = 0; s < ns; s++)
        for (int i = 0; i < n; i++) {
            int a = s * n + i, cnt = nb->start[a + 1] - nb->start[a], p = 0;
            assert_true(cnt <= nb->maxnn);
            memcpy(sorted, nb->list + nb->start[a], sizeof(int) * (size_t)cnt);
            qsort(sorted, (size_t)cnt, sizeof(int), cmp_int);
            for (int j = 0; j < n; j++) {
                int b = s * n + j;
                if (b == a)
                    continue;
                double d2 = 0;
                for (int k = 0; k < 3; k++)
                    d2 += pow(x[3 * b + k] - x[3 * a + k], 2);
                if (d2 < rc * rc) {
                    assert_true(p < cnt);
                    assert_int_equal(sorted[p], b); /* none missed, none twice */
                    p++;
                }
            }
            assert_int_equal(p, cnt); /* none extra */
        }
    free(sorted);
}

static void random_box(nd_rng *r, int n, double L, double *x)
{
    for (int i = 0; i < 3 * n; i++)
        x[i] = L * nd_rng_uniform(r) - 0.5 * L;
}

static void test_sizes_vs_brute_force(void **state)
{
    (void)state;
    nd_rng r;
    nd_rng_seed(&r, 7);
    nd_neighbors nb;
    memset(&nb, 0, sizeof nb);
    int sizes[] = {1, 2, 3, 17, 150, 1200};
    int count = nd_test_sanitized() ? 5 : 6;
    for (int t = 0; t < count; t++) {
        int n = sizes[t];
        double L = cbrt(n / 0.09); /* organic-liquid density, ~0.09 atoms per A^3 */
        double *x = malloc(sizeof(double) * 3 * (size_t)n);
        random_box(&r, n, L, x);
        assert_int_equal(nd_neighbors_build(&nb, 1, n, x, 5.2, NULL), ND_OK);
        check_brute(&nb, 1, n, x, 5.2);
        free(x);
    }
    nd_neighbors_free(&nb);
    nd_neighbors_free(NULL);
}

static void test_batch_and_sparse(void **state)
{
    (void)state;
    nd_rng r;
    nd_rng_seed(&r, 11);
    nd_neighbors nb;
    memset(&nb, 0, sizeof nb);
    const int ns = 4, n = 40;
    double x[3 * 4 * 40];
    random_box(&r, ns * n, 8.0, x); /* all structures overlap in space */
    assert_int_equal(nd_neighbors_build(&nb, ns, n, x, 3.7, NULL), ND_OK);
    check_brute(&nb, ns, n, x, 3.7);
    /* sparse: far-apart atoms do not blow up the cell count */
    double y[12] = {0, 0, 0, 1.2, 0, 0, 5000, 0, 0, 0, -4000, 3000};
    assert_int_equal(nd_neighbors_build(&nb, 1, 4, y, 5.2, NULL), ND_OK);
    check_brute(&nb, 1, 4, y, 5.2);
    assert_int_equal(nb.start[4], 2);
    /* an atom exactly on the cutoff is not a neighbour (r^2 < rc^2) */
    double z[6] = {0, 0, 0, 2.5, 0, 0};
    assert_int_equal(nd_neighbors_build(&nb, 1, 2, z, 2.5, NULL), ND_OK);
    assert_int_equal(nb.start[2], 0);
    nd_error err;
    z[4] = NAN;
    assert_int_equal(nd_neighbors_build(&nb, 1, 2, z, 2.5, &err), ND_ECOMPUTE);
    assert_contains(err.msg, "atom 2");
    nd_neighbors_free(&nb);
}

/* A reused search sizes its per-atom slots from the previous call; an atom
 * with exactly as many neighbours as a slot holds once lost its last
 * neighbour to a later-tested atom (often itself, r = 0, which made the
 * angular features NaN). Clusters of 1 to 150 atoms all within the cutoff,
 * growing and then shrinking, hit every slot size on both sides. */
static void test_slot_boundaries(void **state)
{
    (void)state;
    nd_rng r;
    nd_rng_seed(&r, 23);
    nd_neighbors nb;
    memset(&nb, 0, sizeof nb);
    double *x = malloc(sizeof(double) * 3 * 150);
    for (int pass = 0; pass < 2; pass++)
        for (int k = 1; k <= 150; k++) {
            int n = pass == 0 ? k : 151 - k;
            random_box(&r, n, 2.0, x); /* every pair closer than 3.5 */
            assert_int_equal(nd_neighbors_build(&nb, 1, n, x, 5.2, NULL), ND_OK);
            assert_int_equal(nb.maxnn, n - 1);
            check_brute(&nb, 1, n, x, 5.2);
        }
    free(x);
    nd_neighbors_free(&nb);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_sizes_vs_brute_force),
        cmocka_unit_test(test_batch_and_sparse),
        cmocka_unit_test(test_slot_boundaries),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

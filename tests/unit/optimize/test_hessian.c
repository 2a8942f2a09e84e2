/* Finite-difference Hessian against the analytic Hessian of a Morse cluster. */
#include "tests/lib/testutil.h"
#include "core/numeric.h"

#include "optimize/hessian.h"

#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

/* Morse pair potential V(r) = D (1 - exp(-a (r - re)))^2 over all pairs,
 * with unround parameters. Its Hessian is known in closed form: for a pair
 * with unit vector u and distance r the 3x3 block is
 *   V''(r) u u^T + (V'(r) / r) (I - u u^T),
 * a standard result of differentiating V(|xi - xj|) twice. */
typedef struct {
    double d, a, re;
    int calls, batches, fail_at; /* counters and a structure index that fails (-1 none) */
    int nan;                     /* return NaN gradients */
} morse_ctx;

static void morse_pair(const morse_ctx *c, double r, double *v, double *dv, double *d2v)
{
    double e = exp(-c->a * (r - c->re));
    *v = c->d * (1 - e) * (1 - e);
    *dv = 2 * c->d * c->a * e * (1 - e);
    *d2v = 2 * c->d * c->a * c->a * e * (2 * e - 1);
}

static int morse(void *ctx, int n, const double *x, double *energy, double *g)
{
    morse_ctx *c = ctx;
    double e = 0;
    if (g)
        memset(g, 0, sizeof(double) * 3 * (size_t)n);
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double d[3], r = 0, v, dv, d2v;
            for (int k = 0; k < 3; k++) {
                d[k] = x[3 * i + k] - x[3 * j + k];
                r += d[k] * d[k];
            }
            r = sqrt(r);
            morse_pair(c, r, &v, &dv, &d2v);
            e += v;
            if (g)
                for (int k = 0; k < 3; k++) {
                    g[3 * i + k] += dv * d[k] / r;
                    g[3 * j + k] -= dv * d[k] / r;
                }
        }
    if (g && c->nan)
        g[0] = NAN;
    *energy = e;
    return ND_OK;
}

/* Batch call that counts calls, so the test sees the batches go through it. */
static int morse_batch(void *ctx, int n, int m, const double *x, double *energy, double *g)
{
    morse_ctx *c = ctx;
    c->batches++;
    for (int k = 0; k < m; k++) {
        if (c->calls == c->fail_at)
            return ND_ECOMPUTE;
        c->calls++;
        morse(ctx, n, x + 3 * (size_t)n * k, &energy[k], g ? g + 3 * (size_t)n * k : NULL);
    }
    return ND_OK;
}

static void morse_hessian(const morse_ctx *c, int n, const double *x, double *h)
{
    int nc = 3 * n;
    memset(h, 0, sizeof(double) * (size_t)(nc * nc));
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double u[3], r = 0, v, dv, d2v;
            for (int k = 0; k < 3; k++) {
                u[k] = x[3 * i + k] - x[3 * j + k];
                r += u[k] * u[k];
            }
            r = sqrt(r);
            for (int k = 0; k < 3; k++)
                u[k] /= r;
            morse_pair(c, r, &v, &dv, &d2v);
            for (int a = 0; a < 3; a++)
                for (int b = 0; b < 3; b++) {
                    double blk = d2v * u[a] * u[b] + dv / r * ((a == b) - u[a] * u[b]);
                    h[(3 * i + a) * nc + 3 * i + b] += blk;
                    h[(3 * j + a) * nc + 3 * j + b] += blk;
                    h[(3 * i + a) * nc + 3 * j + b] -= blk;
                    h[(3 * j + a) * nc + 3 * i + b] -= blk;
                }
        }
}

/* Four atoms, not at a minimum and without symmetry. */
static const double X4[12] = {0.113, -0.207, 0.052, 1.384, 0.161, -0.094,
                              -0.322, 1.291, 0.187, 0.409, 0.377, 1.213};

static double max_diff(const double *a, const double *b, int m)
{
    double d = 0;
    for (int i = 0; i < m; i++)
        d = nd_larger(d, fabs(a[i] - b[i]));
    return d;
}

static void test_matches_analytic(void **state)
{
    (void)state;
    morse_ctx c = {68.3, 1.87, 1.29, 0, 0, -1, 0};
    nd_energy pot = {morse, NULL, &c};
    double h[144], ref[144], g0[12], gref[12], e;
    nd_hessian_info info;
    morse_hessian(&c, 4, X4, ref);
    nd_error err;
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, NULL, NULL, h, g0, &info, &err), ND_OK);
    assert_int_equal(info.nfree, 4);
    assert_int_equal(info.ncalls, 25);
    assert_close(info.step, ND_HESSIAN_STEP_DEFAULT, 0);
    /* Truncation error (h^2/6) V'''' ~ 2.5e-5 * 14 D a^4 ~ 0.3 kcal/mol/A^2 at most
     * for these stiff springs; the elements are of order 2 D a^2 = 478. */
    assert_true(max_diff(h, ref, 144) < 0.05);
    assert_true(max_diff(h, ref, 144) > 0); /* a finite difference, not the analytic matrix */
    morse(&c, 4, X4, &e, gref);
    assert_true(max_diff(g0, gref, 12) == 0);
    for (int i = 0; i < 12; i++)
        for (int j = 0; j < 12; j++)
            assert_true(h[i * 12 + j] == h[j * 12 + i]);
    assert_true(info.asymmetry < 0.05);
}

/* Error order: halving h divides the error by about 4 (O(h^2)). */
static void test_error_order(void **state)
{
    (void)state;
    morse_ctx c = {68.3, 1.87, 1.29, 0, 0, -1, 0};
    nd_energy pot = {morse, NULL, &c};
    double h1[144], h2[144], ref[144];
    morse_hessian(&c, 4, X4, ref);
    nd_hessian_opts o1 = {0.02, 0}, o2 = {0.01, 0};
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, &o1, NULL, h1, NULL, NULL, NULL), ND_OK);
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, &o2, NULL, h2, NULL, NULL, NULL), ND_OK);
    double r = max_diff(h1, ref, 144) / max_diff(h2, ref, 144);
    assert_true(r > 3.6 && r < 4.4);
}

/* The partial Hessian of the free atoms is the corresponding block of the full one. */
static void test_frozen_block(void **state)
{
    (void)state;
    morse_ctx c = {68.3, 1.87, 1.29, 0, 0, -1, 0};
    nd_energy pot = {morse, NULL, &c};
    double full[144], part[36];
    int frozen[4] = {1, 0, 1, 0};
    nd_hessian_info info;
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, NULL, NULL, full, NULL, NULL, NULL), ND_OK);
    size_t ws = nd_hessian_work_size(4, 2, NULL);
    double *work = malloc(sizeof(double) * ws);
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, frozen, NULL, work, part, NULL, &info, NULL),
                     ND_OK);
    assert_int_equal(info.nfree, 2);
    assert_int_equal(info.ncalls, 12);
    int idx[6] = {3, 4, 5, 9, 10, 11};
    for (int i = 0; i < 6; i++)
        for (int j = 0; j < 6; j++)
            assert_true(part[i * 6 + j] == full[idx[i] * 12 + idx[j]]);
    free(work);
}

/* Through the batch call, in chunks of any size, the result is bit for bit
 * the same as through single calls. */
static void test_batches(void **state)
{
    (void)state;
    morse_ctx c = {68.3, 1.87, 1.29, 0, 0, -1, 0};
    nd_energy single = {morse, NULL, &c}, batched = {morse, morse_batch, &c};
    double a[144], b[144];
    assert_int_equal(nd_hessian_compute(&single, 4, X4, NULL, NULL, NULL, a, NULL, NULL, NULL), ND_OK);
    assert_int_equal(c.batches, 0);
    assert_int_equal(nd_hessian_compute(&batched, 4, X4, NULL, NULL, NULL, b, NULL, NULL, NULL), ND_OK);
    assert_int_equal(c.batches, 1);
    assert_int_equal(c.calls, 24);
    assert_true(memcmp(a, b, sizeof a) == 0);
    nd_hessian_opts o = {0, 7}; /* odd: rounded down to 6 per call, 4 calls */
    c.batches = c.calls = 0;
    assert_int_equal(nd_hessian_compute(&batched, 4, X4, NULL, &o, NULL, b, NULL, NULL, NULL), ND_OK);
    assert_int_equal(c.batches, 4);
    assert_true(memcmp(a, b, sizeof a) == 0);
    assert_int_equal(nd_hessian_work_size(4, 4, &o), (size_t)(6 * 12 * 2 + 6));
}

/* Determinism: one thread or two, the Hessian is the same bit for bit
 * (each displaced gradient is independent and assembly is in a fixed order). */
static void test_thread_count(void **state)
{
    (void)state;
    morse_ctx c = {68.3, 1.87, 1.29, 0, 0, -1, 0};
    nd_energy pot = {morse, NULL, &c};
    double a[144], b[144];
    int saved = omp_get_max_threads();
    omp_set_num_threads(1);
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, NULL, NULL, a, NULL, NULL, NULL), ND_OK);
    omp_set_num_threads(2);
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, NULL, NULL, b, NULL, NULL, NULL), ND_OK);
    omp_set_num_threads(saved);
    assert_true(memcmp(a, b, sizeof a) == 0);
}

static void test_errors(void **state)
{
    (void)state;
    morse_ctx c = {68.3, 1.87, 1.29, 0, 0, -1, 0};
    nd_energy pot = {morse, morse_batch, &c};
    double h[144], x[12];
    nd_error err;
    nd_hessian_opts bad = {-0.01, 0};
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, &bad, NULL, h, NULL, NULL, &err), ND_EINVAL);
    assert_contains(err.msg, "step");
    int all[4] = {1, 1, 1, 1};
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, all, NULL, NULL, h, NULL, NULL, &err), ND_EINVAL);
    assert_contains(err.msg, "frozen");
    assert_int_equal(nd_hessian_compute(&pot, 0, X4, NULL, NULL, NULL, h, NULL, NULL, &err), ND_EINVAL);
    assert_int_equal(nd_hessian_compute(NULL, 4, X4, NULL, NULL, NULL, h, NULL, NULL, &err), ND_EINVAL);
    memcpy(x, X4, sizeof x);
    x[7] = INFINITY;
    assert_int_equal(nd_hessian_compute(&pot, 4, x, NULL, NULL, NULL, h, NULL, NULL, &err), ND_EINPUT);
    assert_contains(err.msg, "atom 3");
    c.fail_at = 5;
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, NULL, NULL, h, NULL, NULL, &err), ND_ECOMPUTE);
    assert_contains(err.msg, "displaced");
    c.fail_at = -1;
    c.nan = 1;
    assert_int_equal(nd_hessian_compute(&pot, 4, X4, NULL, NULL, NULL, h, NULL, NULL, &err), ND_ECOMPUTE);
    assert_contains(err.msg, "non-finite");
    assert_int_equal(nd_hessian_count_free(4, NULL), 4);
    assert_int_equal(nd_hessian_work_size(0, 0, NULL), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_matches_analytic), cmocka_unit_test(test_error_order),
        cmocka_unit_test(test_frozen_block),     cmocka_unit_test(test_batches),
        cmocka_unit_test(test_thread_count), cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

/* Per-element networks: silu and its derivatives, the forward pass against
 * plain loops, the backward pass against finite differences, and chunks
 * taller than ND_SMALL_GEMM_MAX_ROWS (OpenBLAS) against the same rows in
 * short chunks (the small-row kernels). */
#include "tests/lib/testutil.h"

#include "core/rng.h"
#include "potential/model.h"
#include "potential/network.h"
#include "potential/small_gemm.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* silu(0) = 0, silu'(0) = 1/2, silu''(0) = 1/2 (from the definition
 * z sigma(z): sigma(0) = 1/2, sigma'(0) = 1/4); elsewhere the derivatives
 * against central differences (h = 1e-5). */
static void test_silu(void **state)
{
    (void)state;
    double d1, d2;
    assert_close(nd_net_silu(0, &d1, &d2), 0, 0);
    assert_close(d1, 0.5, 1e-15);
    assert_close(d2, 0.5, 1e-15);
    for (double z = -30.5; z < 30; z += 1.385) {
        const double h = 1e-5;
        double a1, b1;
        nd_net_silu(z, &d1, &d2);
        double fp = nd_net_silu(z + h, &a1, NULL), fm = nd_net_silu(z - h, &b1, NULL);
        assert_close(d1, (fp - fm) / (2 * h), 1e-8);
        assert_close(d2, (a1 - b1) / (2 * h), 1e-8);
        assert_close(nd_net_silu(z, NULL, NULL), z / (1 + exp(-z)), 1e-14 * (1 + fabs(z)));
    }
    assert_true(isfinite(nd_net_silu(-800, &d1, &d2)) && isfinite(d1) && isfinite(d2));
}

static nd_model *model3(void)
{
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.nelements = 2;
    s.z[0] = 1;
    s.z[1] = 6;
    s.nhidden = 3;
    s.hidden[0] = 7;
    s.hidden[1] = 5;
    s.hidden[2] = 4;
    s.members = 3;
    nd_model *m;
    assert_int_equal(nd_model_new(&m, &s, 77, NULL), ND_OK);
    nd_rng r;
    nd_rng_seed(&r, 78);
    for (int f = 0; f < 2 * m->D; f++) {
        m->mu[f] = nd_rng_normal(&r);
        m->scale[f] = 0.3 + nd_rng_uniform(&r);
    }
    return m;
}

/* Energy of member k for input g (D features) by plain loops. */
static double naive(const nd_model *m, int e, int k, const double *g)
{
    double a[64], b[64];
    for (int f = 0; f < m->D; f++)
        a[f] = m->scale[e * m->D + f] * (g[f] - m->mu[e * m->D + f]);
    int win = m->D;
    double *in = a, *out = b;
    static double big[1024];
    memcpy(big, a, sizeof(double) * (size_t)m->D);
    in = big;
    for (int l = 1; l <= m->nhidden; l++) {
        const double *W = nd_net_weights(m, e, l, k), *bb = nd_net_bias(m, e, l, k);
        for (int o = 0; o < m->width[l]; o++) {
            double z = bb[o];
            for (int i = 0; i < win; i++)
                z += W[o * win + i] * in[i];
            out[o] = z / (1 + exp(-z));
        }
        win = m->width[l];
        memcpy(a, out, sizeof(double) * (size_t)win);
        in = a;
    }
    const double *w = nd_net_weights(m, e, m->nhidden + 1, k);
    double E = nd_net_bias(m, e, m->nhidden + 1, k)[0];
    for (int i = 0; i < win; i++)
        E += w[i] * in[i];
    return E;
}

static void test_forward_backward(void **state)
{
    (void)state;
    nd_model *m = model3();
    const int rows = 5, D = m->D, K = m->nmembers;
    nd_rng r;
    nd_rng_seed(&r, 3);
    double *G = malloc(sizeof(double) * (size_t)(rows * D)), *a0 = malloc(sizeof(double) * (size_t)(rows * D));
    double *U = malloc(sizeof(double) * (size_t)(rows * D)), E[5 * 3], E2[5 * 3];
    double *work = malloc(sizeof(double) * nd_net_work_doubles(m, rows, K));
    for (int i = 0; i < rows * D; i++)
        G[i] = fabs(nd_rng_normal(&r));
    for (int e = 0; e < 2; e++) {
        nd_net_input(m, e, rows, G, a0);
        nd_net_forward(m, e, 0, K, rows, a0, work, E);
        for (int i = 0; i < rows; i++)
            for (int k = 0; k < K; k++)
                assert_close(E[i * K + k], naive(m, e, k, G + i * D), 1e-12);
        /* a sub-range of members gives the same numbers */
        nd_net_forward(m, e, 1, 3, rows, a0, work, E2);
        for (int i = 0; i < rows; i++)
            for (int k = 1; k < 3; k++)
                assert_close(E2[i * 2 + k - 1], E[i * K + k], 1e-13);
        /* backward of the mean against central differences in G */
        nd_net_forward(m, e, 0, K, rows, a0, work, E);
        nd_net_backward(m, e, 0, K, rows, 1.0 / K, work, U);
        for (int i = 0; i < rows; i++)
            for (int f = 0; f < D; f += 3) {
                const double h = 1e-5;
                double *g = G + i * D, g0 = g[f], ep = 0, em = 0;
                g[f] = g0 + h;
                for (int k = 0; k < K; k++)
                    ep += naive(m, e, k, g) / K;
                g[f] = g0 - h;
                for (int k = 0; k < K; k++)
                    em += naive(m, e, k, g) / K;
                g[f] = g0;
                assert_close(U[i * D + f], (ep - em) / (2 * h), 1e-8);
            }
    }
    free(G);
    free(a0);
    free(U);
    free(work);
    nd_model_free(m);
}

/* Forward and backward pass of element e over rows rows of G, on the folded
 * layer 1 (W1, b1) or the model's own. */
static void both_passes(const nd_model *m, int e, int folded, int rows, const double *G,
                        const double *W1, const double *b1, double *work, double *E, double *U)
{
    const int K = m->nmembers;
    if (folded) {
        nd_net_forward_folded(m, e, 0, K, rows, G, W1, b1, work, E);
        nd_net_backward_folded(m, e, 0, K, rows, 0.37, W1, work, U);
    } else {
        nd_net_forward(m, e, 0, K, rows, G, work, E);
        nd_net_backward(m, e, 0, K, rows, 0.37, work, U);
    }
}

/* One chunk of rows above the threshold and the same rows in chunks of 1,
 * 3 and 7 rows give the same energies and U to rounding (relative 1e-13:
 * the two paths sum in different orders), on the folded layer 1 of
 * potential.c and the model's own. */
static void test_tall_and_short(void **state)
{
    (void)state;
    nd_model *m = model3();
    const int rows = ND_SMALL_GEMM_MAX_ROWS + 9, D = m->D, K = m->nmembers;
    nd_rng r;
    nd_rng_seed(&r, 31);
    double *G = malloc(sizeof(double) * (size_t)(rows * D));
    double *U = malloc(sizeof(double) * (size_t)(rows * D));
    double *U2 = malloc(sizeof(double) * (size_t)(rows * D));
    double *E = malloc(sizeof(double) * (size_t)(rows * K));
    double *E2 = malloc(sizeof(double) * (size_t)(rows * K));
    double *W1 = malloc(sizeof(double) * (size_t)(K * m->width[1] * D));
    double *b1 = malloc(sizeof(double) * (size_t)(K * m->width[1]));
    double *work = malloc(sizeof(double) * nd_net_work_doubles(m, rows, K));
    for (int i = 0; i < rows * D; i++)
        G[i] = fabs(nd_rng_normal(&r));
    for (int e = 0; e < 2; e++) {
        nd_net_fold_input(m, e, W1, b1);
        for (int folded = 0; folded < 2; folded++) {
            both_passes(m, e, folded, rows, G, W1, b1, work, E, U);
            const int sizes[3] = {1, 3, 7};
            for (int c = 0; c < 3; c++)
                for (int r0 = 0; r0 < rows; r0 += sizes[c]) {
                    int nr = rows - r0 < sizes[c] ? rows - r0 : sizes[c];
                    const double *g = G + (size_t)r0 * D;
                    both_passes(m, e, folded, nr, g, W1, b1, work, E2 + (size_t)r0 * K,
                                U2 + (size_t)r0 * D);
                }
            for (int i = 0; i < rows * K; i++)
                assert_rel_close(E2[i], E[i], 1e-13, 1e-3);
            for (int i = 0; i < rows * D; i++)
                assert_rel_close(U2[i], U[i], 1e-13, 1e-3);
        }
    }
    free(G);
    free(U);
    free(U2);
    free(E);
    free(E2);
    free(W1);
    free(b1);
    free(work);
    nd_model_free(m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_silu),
        cmocka_unit_test(test_forward_backward),
        cmocka_unit_test(test_tall_and_short),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

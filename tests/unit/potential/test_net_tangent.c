/* Tangent pass through a member's network and its reverse: T against a
 * central difference of E along the tangent input and against U . v from
 * nd_net_backward; the reverse pass against central differences of
 * sum(cE E + cT T) in every weight and bias; the primal-only mode. */
#include "tests/lib/testutil.h"
#include "core/numeric.h"

#include "core/rng.h"
#include "potential/model.h"
#include "potential/net_tangent.h"
#include "potential/network.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define ROWS 6

/* Two elements (H, O), hidden 7-5, 3 members, scaled inputs. */
static nd_model *small_model(void)
{
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.nelements = 2;
    s.z[0] = 1;
    s.z[1] = 8;
    s.nhidden = 2;
    s.hidden[0] = 7;
    s.hidden[1] = 5;
    s.members = 3;
    nd_model *m;
    assert_int_equal(nd_model_new(&m, &s, 41, NULL), ND_OK);
    nd_rng r;
    nd_rng_seed(&r, 42);
    for (int f = 0; f < 2 * m->D; f++) {
        m->mu[f] = 0.2 * nd_rng_normal(&r);
        m->scale[f] = 0.4 + nd_rng_uniform(&r);
    }
    /* a non-trivial output layer, so every weight matters */
    for (int e = 0; e < 2; e++)
        for (int k = 0; k < 3; k++)
            for (int h = 0; h < 5; h++)
                nd_net_weights(m, e, 3, k)[h] = 0.7 * nd_rng_normal(&r);
    return m;
}

/* sum_r cE[r] E_r + cT[r] T_r for member k of element e. */
static double objective(const nd_model *m, int e, int k, const double *a0, const double *ad0,
                        const double *cE, const double *cT, double *work)
{
    double E[ROWS], T[ROWS], sum = 0;
    nd_net_tangent_forward(m, e, k, ROWS, a0, ad0, work, E, T);
    for (int r = 0; r < ROWS; r++)
        sum += cE[r] * E[r] + (ad0 ? cT[r] * T[r] : 0);
    return sum;
}

static void test_tangent_values(void **state)
{
    (void)state;
    nd_model *m = small_model();
    const int D = m->D;
    nd_rng r;
    nd_rng_seed(&r, 5);
    double *G = malloc(sizeof(double) * ROWS * (size_t)D), *a0 = malloc(sizeof(double) * ROWS * (size_t)D);
    double *v = malloc(sizeof(double) * ROWS * (size_t)D), *ad0 = malloc(sizeof(double) * ROWS * (size_t)D);
    double *ap = malloc(sizeof(double) * ROWS * (size_t)D), *am = malloc(sizeof(double) * ROWS * (size_t)D);
    double *U = malloc(sizeof(double) * ROWS * (size_t)D);
    double *work = malloc(sizeof(double) * nd_net_tangent_work_doubles(m, ROWS));
    double *nw = malloc(sizeof(double) * nd_net_work_doubles(m, ROWS, 1));
    for (int i = 0; i < ROWS * D; i++) {
        G[i] = fabs(nd_rng_normal(&r));
        v[i] = nd_rng_normal(&r);
    }
    for (int e = 0; e < 2; e++)
        for (int k = 0; k < 3; k++) {
            nd_net_input(m, e, ROWS, G, a0);
            for (int i = 0; i < ROWS * D; i++)
                ad0[i] = m->scale[e * D + i % D] * v[i];
            double E[ROWS], T[ROWS], E2[ROWS], Ep[ROWS], Em[ROWS];
            nd_net_tangent_forward(m, e, k, ROWS, a0, ad0, work, E, T);
            /* the primal agrees with network.c's forward pass */
            nd_net_forward(m, e, k, k + 1, ROWS, a0, nw, E2);
            nd_net_backward(m, e, k, k + 1, ROWS, 1.0, nw, U);
            for (int q = 0; q < ROWS; q++) {
                assert_close(E[q], E2[q], 1e-12);
                double uv = 0;
                for (int f = 0; f < D; f++)
                    uv += U[q * D + f] * v[q * D + f];
                assert_close(T[q], uv, 1e-11 * (1 + fabs(uv)));
            }
            const double h = 1e-5;
            for (int i = 0; i < ROWS * D; i++) {
                ap[i] = a0[i] + h * ad0[i];
                am[i] = a0[i] - h * ad0[i];
            }
            nd_net_tangent_forward(m, e, k, ROWS, ap, NULL, work, Ep, NULL);
            nd_net_tangent_forward(m, e, k, ROWS, am, NULL, work, Em, NULL);
            for (int q = 0; q < ROWS; q++)
                assert_close(T[q], (Ep[q] - Em[q]) / (2 * h), 1e-8 * (1 + fabs(T[q])));
        }
    free(G);
    free(a0);
    free(v);
    free(ad0);
    free(ap);
    free(am);
    free(U);
    free(work);
    free(nw);
    nd_model_free(m);
}

/* Reverse pass against central differences in every parameter of the
 * member block, with and without the tangent. */
static void test_reverse(void **state)
{
    (void)state;
    nd_model *m = small_model();
    const int D = m->D;
    const size_t B = nd_net_tangent_block_doubles(m);
    nd_rng r;
    nd_rng_seed(&r, 6);
    double *a0 = malloc(sizeof(double) * ROWS * (size_t)D), *ad0 = malloc(sizeof(double) * ROWS * (size_t)D);
    double *work = malloc(sizeof(double) * nd_net_tangent_work_doubles(m, ROWS));
    double *grad = malloc(sizeof(double) * B);
    double cE[ROWS], cT[ROWS];
    for (int i = 0; i < ROWS * D; i++) {
        a0[i] = nd_rng_normal(&r);
        ad0[i] = nd_rng_normal(&r);
    }
    for (int q = 0; q < ROWS; q++) {
        cE[q] = 0.3 + nd_rng_uniform(&r);
        cT[q] = nd_rng_normal(&r);
    }
    double worst = 0;
    for (int mode = 0; mode < 2; mode++) {
        const double *ad = mode ? ad0 : NULL;
        const int e = 1, k = 2;
        double E[ROWS], T[ROWS];
        memset(grad, 0, sizeof(double) * B);
        nd_net_tangent_forward(m, e, k, ROWS, a0, ad, work, E, T);
        nd_net_tangent_reverse(m, e, k, ROWS, a0, ad, cE, cT, work, grad);
        for (int l = 1; l <= m->nhidden + 1; l++) {
            double *W = nd_net_weights(m, e, l, k), *b = nd_net_bias(m, e, l, k);
            size_t nw = (size_t)m->width[l] * (size_t)m->width[l - 1];
            for (size_t q = 0; q < nw + (size_t)m->width[l]; q++) {
                double *p = q < nw ? W + q : b + (q - nw);
                size_t gi = q < nw ? nd_net_tangent_w_offset(m, l) + q
                                   : nd_net_tangent_b_offset(m, l) + (q - nw);
                const double h = 1e-5, p0 = *p;
                *p = p0 + h;
                double fp = objective(m, e, k, a0, ad, cE, cT, work);
                *p = p0 - h;
                double fm = objective(m, e, k, a0, ad, cE, cT, work);
                *p = p0;
                double fd = (fp - fm) / (2 * h);
                double rel = fabs(fd - grad[gi]) / nd_larger(fabs(fd), 1e-3);
                if (rel > worst)
                    worst = rel;
                assert_close(grad[gi], fd, 1e-7 * nd_larger(fabs(fd), 1e-2));
            }
        }
    }
    print_message("# largest relative error of the reverse pass: %.2e\n", worst);
    /* the reverse pass adds to grad: a second call doubles it */
    {
        double E[ROWS], T[ROWS];
        double *g2 = malloc(sizeof(double) * B);
        memset(g2, 0, sizeof(double) * B);
        nd_net_tangent_forward(m, 0, 0, ROWS, a0, ad0, work, E, T);
        nd_net_tangent_reverse(m, 0, 0, ROWS, a0, ad0, cE, cT, work, g2);
        memcpy(grad, g2, sizeof(double) * B);
        nd_net_tangent_forward(m, 0, 0, ROWS, a0, ad0, work, E, T);
        nd_net_tangent_reverse(m, 0, 0, ROWS, a0, ad0, cE, cT, work, g2);
        for (size_t q = 0; q < B; q++)
            assert_close(g2[q], 2 * grad[q], 1e-12 * (1 + fabs(grad[q])));
        free(g2);
    }
    free(a0);
    free(ad0);
    free(work);
    free(grad);
    nd_model_free(m);
}

/* The block layout covers every parameter once. */
static void test_layout(void **state)
{
    (void)state;
    nd_model *m = small_model();
    size_t B = nd_net_tangent_block_doubles(m);
    /* D*7+7 + 7*5+5 + 5*1+1 */
    assert_int_equal(B, (size_t)(m->D * 7 + 7 + 35 + 5 + 5 + 1));
    assert_int_equal(nd_net_tangent_w_offset(m, 1), 0);
    assert_int_equal(nd_net_tangent_b_offset(m, 3), B - 1);
    assert_int_equal(m->elem_stride, 3 * B);
    nd_model_free(m);
}

/* The two-step pass: primal, then U and the tangent, equals the one-step
 * pass and network.c's backward pass (bit for bit for E and T, which are
 * the same operations; U to rounding), also when two elements use
 * neighbouring slices of one work buffer. */
static void test_two_steps(void **state)
{
    (void)state;
    nd_model *m = small_model();
    const int D = m->D;
    nd_rng r;
    nd_rng_seed(&r, 8);
    size_t per = nd_net_tangent_work_doubles(m, 1);
    assert_int_equal(nd_net_tangent_work_doubles(m, ROWS), ROWS * per);
    double *a0 = malloc(sizeof(double) * 2 * ROWS * (size_t)D), *ad0 = malloc(sizeof(double) * 2 * ROWS * (size_t)D);
    double *U = malloc(sizeof(double) * ROWS * (size_t)D), *U2 = malloc(sizeof(double) * ROWS * (size_t)D);
    double *work = malloc(sizeof(double) * 2 * ROWS * per), *one = malloc(sizeof(double) * ROWS * per);
    double *nw = malloc(sizeof(double) * nd_net_work_doubles(m, ROWS, 1));
    for (int i = 0; i < 2 * ROWS * D; i++) {
        a0[i] = nd_rng_normal(&r);
        ad0[i] = nd_rng_normal(&r);
    }
    double E[2][ROWS], T[2][ROWS], E1[ROWS], T1[ROWS], E2[ROWS];
    for (int e = 0; e < 2; e++)
        nd_net_tangent_primal(m, e, 1, ROWS, a0 + e * ROWS * D, work + e * ROWS * per, E[e]);
    for (int e = 0; e < 2; e++) {
        nd_net_tangent_input_grad(m, e, 1, ROWS, work + e * ROWS * per, U);
        nd_net_tangent_push(m, e, 1, ROWS, ad0 + e * ROWS * D, work + e * ROWS * per, T[e]);
        nd_net_tangent_forward(m, e, 1, ROWS, a0 + e * ROWS * D, ad0 + e * ROWS * D, one, E1, T1);
        nd_net_forward(m, e, 1, 2, ROWS, a0 + e * ROWS * D, nw, E2);
        nd_net_backward(m, e, 1, 2, ROWS, 1.0, nw, U2);
        for (int q = 0; q < ROWS; q++) {
            assert_true(E[e][q] == E1[q]);
            assert_true(T[e][q] == T1[q]);
            assert_close(E[e][q], E2[q], 1e-12);
        }
        for (int i = 0; i < ROWS * D; i++)
            assert_close(U[i], U2[i], 1e-12 * (1 + fabs(U2[i])));
    }
    free(a0);
    free(ad0);
    free(U);
    free(U2);
    free(work);
    free(one);
    free(nw);
    nd_model_free(m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_tangent_values),
        cmocka_unit_test(test_reverse),
        cmocka_unit_test(test_layout),
        cmocka_unit_test(test_two_steps),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

/* The small-row matrix products against OpenBLAS's dgemm on random matrices
 * of many shapes: every row count up to past ND_SMALL_GEMM_MAX_ROWS, odd
 * column counts, sums shorter than a vector and longer than one stretch of
 * the transposed copy, padded leading dimensions, C = A B and C = A B^T,
 * with and without the old C added. */
#include "tests/lib/testutil.h"

#include "core/rng.h"
#include "potential/small_gemm.h"

#include <cblas.h>
#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Fills n doubles with "unround" values of both signs and mixed sizes. */
static void fill(nd_rng *r, double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        v[i] = nd_rng_normal(r) * (0.3 + nd_rng_uniform(r));
}

/* One product (nt: C = A B^T, else C = A B; add: plus the old C) against
 * cblas_dgemm. Both compute each entry as the old value (or 0) plus a sum
 * of k products, in some order; any such order has an error below
 * gamma_{k+1} (|C0| + sum |a_p b_p|), gamma_j = j u / (1 - j u), u = 2^-53
 * (the error bound of an inner product: N. J. Higham, Accuracy and
 * Stability of Numerical Algorithms, 2nd ed., SIAM 2002, section 3.1; from
 * memory), so the two differ by at most twice that (plus 1% for the
 * rounding of the bound itself). Entries of C outside the m x n block must
 * not change. Returns the largest difference relative to its bound. */
static double check(nd_rng *r, int nt, int add, int m, int n, int k)
{
    const int lda = k + 3, ldb = (nt ? k : n) + 2, ldc = n + 5;
    const int brows = nt ? n : k;
    double *A = malloc(sizeof(double) * (size_t)(m * lda));
    double *B = malloc(sizeof(double) * ((size_t)(brows * ldb) + 1));
    double *C = malloc(sizeof(double) * (size_t)(m * ldc));
    double *R = malloc(sizeof(double) * (size_t)(m * ldc));
    double *S = malloc(sizeof(double) * (size_t)(m * ldc));
    assert_non_null(A);
    assert_non_null(B);
    assert_non_null(C);
    assert_non_null(R);
    assert_non_null(S);
    fill(r, A, (size_t)(m * lda));
    fill(r, B, (size_t)(brows * ldb));
    fill(r, C, (size_t)(m * ldc));
    memcpy(R, C, sizeof(double) * (size_t)(m * ldc));
    memcpy(S, C, sizeof(double) * (size_t)(m * ldc)); /* the old C */
    if (nt) {
        nd_small_gemm_nt(m, n, k, A, lda, B, ldb, add, C, ldc);
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, m, n, k, 1.0, A, lda, B, ldb,
                    add ? 1.0 : 0.0, R, ldc);
    } else {
        nd_small_gemm_nn(m, n, k, A, lda, B, ldb, add, C, ldc);
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, m, n, k, 1.0, A, lda, B, ldb,
                    add ? 1.0 : 0.0, R, ldc);
    }
    const double u = DBL_EPSILON / 2, gamma = (k + 1) * u / (1 - (k + 1) * u);
    double worst = 0;
    for (int i = 0; i < m; i++)
        for (int j = 0; j < ldc; j++) {
            double c = C[i * ldc + j], ref = R[i * ldc + j], old = S[i * ldc + j];
            if (j >= n) {
                assert_true(memcmp(&c, &old, sizeof c) == 0);
                continue;
            }
            double scale = add ? fabs(old) : 0;
            for (int p = 0; p < k; p++) {
                double b = nt ? B[j * ldb + p] : B[p * ldb + j];
                scale += fabs(A[i * lda + p] * b);
            }
            double bound = 2 * gamma * scale * 1.01 + 1e-300;
            double rel = fabs(c - ref) / bound;
            if (rel > worst)
                worst = rel;
        }
    free(A);
    free(B);
    free(C);
    free(R);
    free(S);
    return worst;
}

static void test_against_dgemm(void **state)
{
    (void)state;
    nd_rng r;
    nd_rng_seed(&r, 1729);
    /* n: one column, odd counts, a vector, past one panel; k: an empty sum,
     * shorter than a vector, odd, a layer's width (96), the default
     * descriptor size (210: two stretches of the transposed copy) */
    static const int NS[] = {1, 3, 7, 8, 13, 33, 64};
    static const int KS[] = {0, 1, 3, 5, 17, 96, 210};
    const int mmax = ND_SMALL_GEMM_MAX_ROWS + 8;
    double worst = 0;
    int count = 0;
    for (int m = 1; m <= mmax; m += m < ND_SMALL_GEMM_MAX_ROWS + 1 ? 1 : 7)
        for (size_t a = 0; a < sizeof NS / sizeof *NS; a++)
            for (size_t b = 0; b < sizeof KS / sizeof *KS; b++)
                for (int kind = 0; kind < 4; kind++) {
                    /* under the sanitizers, a quarter of the shapes */
                    if (nd_test_sanitized() && (m + (int)a + (int)b + kind) % 4)
                        continue;
                    double w = check(&r, kind & 1, kind >> 1, m, NS[a], KS[b]);
                    if (w > worst)
                        worst = w;
                    count++;
                }
    print_message("# %d products: largest difference %.3g of the rounding bound\n", count, worst);
    assert_true(worst <= 1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_against_dgemm),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}

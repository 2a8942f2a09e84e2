/* Per-element networks: forward and backward passes as one matrix product
 * per layer over all atoms of an element (OpenBLAS's dgemm, or for chunks
 * of few rows the kernels of small_gemm.c). See network.h for the layout.
 *
 * -fno-trapping-math lets GCC vectorise the activation loop (nd_exp has
 * comparisons); it changes no result. */
#pragma GCC optimize("no-trapping-math")
#include "potential/network.h"

#include "potential/small_gemm.h"

#include <cblas.h>
#include <math.h>
#include <string.h>

size_t nd_net_layout(struct nd_model *m)
{
    m->D = nd_descriptor_size(&m->desc, m->nel);
    m->width[0] = m->D;
    m->width[m->nhidden + 1] = 1;
    size_t off = 0, K = (size_t)m->nmembers;
    for (int l = 1; l <= m->nhidden + 1; l++) {
        m->w_off[l] = off;
        off += K * (size_t)m->width[l] * (size_t)m->width[l - 1];
        m->b_off[l] = off;
        off += K * (size_t)m->width[l];
    }
    m->elem_stride = off;
    m->nparams = 2 * (size_t)m->nel * (size_t)m->D + (size_t)m->nel + (size_t)m->nel * off;
    return m->nparams;
}

void nd_net_bind(struct nd_model *m)
{
    m->mu = m->params;
    m->scale = m->mu + (size_t)m->nel * m->D;
    m->offset = m->scale + (size_t)m->nel * m->D;
    m->net = m->offset + m->nel;
}

size_t nd_net_work_doubles(const struct nd_model *m, int rows, int nk)
{
    size_t sum = 0, mx = 1;
    for (int l = 1; l <= m->nhidden; l++) {
        size_t w = (size_t)nk * (size_t)m->width[l];
        sum += 2 * w;
        if (w > mx)
            mx = w;
    }
    return (size_t)rows * (sum + 2 * mx);
}

double nd_net_silu(double z, double *d1, double *d2)
{
    double s = 1 / (1 + exp(-z));
    if (d1)
        *d1 = s * (1 + z * (1 - s));
    if (d2)
        *d2 = s * (1 - s) * (2 + z * (1 - 2 * s));
    return z * s;
}

void nd_net_input(const struct nd_model *m, int e, int rows, const double *G, double *a0)
{
    const int D = m->D;
    const double *mu = m->mu + (size_t)e * D, *sc = m->scale + (size_t)e * D;
    for (int r = 0; r < rows; r++) {
        const double *g = G + (size_t)r * D;
        double *a = a0 + (size_t)r * D;
        for (int f = 0; f < D; f++)
            a[f] = sc[f] * (g[f] - mu[f]);
    }
}

/* Applies silu in place (the bias is already in, from the dgemm): z -> a,
 * and s = silu'(z). The logistic function takes exp(-z) from nd_exp
 * (vectorised; within an ulp of the C library's) with -z capped at 700,
 * where 1 / (1 + e^700) is already below 1e-304. The avx2 clone does the
 * same IEEE operations four at a time instead of two (no fused
 * multiply-add in C11 mode): same bits. */
__attribute__((target_clones("avx2", "default"))) static void
activate(int rows, int nk, int w, double *a, double *s)
{
    size_t n = (size_t)rows * (size_t)nk * (size_t)w;
#pragma omp simd
    for (size_t c = 0; c < n; c++) {
        double z = a[c];
        double mz = -z < 700 ? -z : 700;
        double sg = 1 / (1 + nd_exp(mz));
        a[c] = z * sg;
        s[c] = sg * (1 + z * (1 - sg));
    }
}

/* C (m x n) = A (m x k) B^T + beta C, B n x k (a layer's weights, stored
 * output by input): OpenBLAS for tall chunks, small_gemm.c's kernel for
 * chunks of few rows (where OpenBLAS spends as long packing the weights as
 * multiplying). The choice depends on m only: the same rows give the same
 * bits at any thread count. beta is 0 or 1. */
static void gemm_nt(int m, int n, int k, const double *A, int lda, const double *B, int ldb,
                    double beta, double *C, int ldc)
{
    if (m <= ND_SMALL_GEMM_MAX_ROWS)
        nd_small_gemm_nt(m, n, k, A, lda, B, ldb, beta != 0, C, ldc);
    else
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, m, n, k, 1.0, A, lda, B, ldb, beta, C,
                    ldc);
}

/* C (m x n) = A (m x k) B + beta C, B k x n; as gemm_nt. */
static void gemm_nn(int m, int n, int k, const double *A, int lda, const double *B, int ldb,
                    double beta, double *C, int ldc)
{
    if (m <= ND_SMALL_GEMM_MAX_ROWS)
        nd_small_gemm_nn(m, n, k, A, lda, B, ldb, beta != 0, C, ldc);
    else
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, m, n, k, 1.0, A, lda, B, ldb, beta,
                    C, ldc);
}

/* Copies the bias row (len doubles) into each of rows rows of out, so that
 * the layer's dgemm starts from it (beta = 1): that adds the bias where a
 * separate pass would add it, in the same operation order (one K block),
 * and spares the dgemm its zeroing pass over the output. */
static void start_from_bias(int rows, size_t len, const double *bias, double *out)
{
    for (int r = 0; r < rows; r++)
        memcpy(out + (size_t)r * len, bias, len * sizeof(double));
}

/* Forward pass with layer 1 given as W1 (nk H1 x D, members stacked) and
 * b1 (nk H1) applied to a0: the model's own layer on scaled inputs, or the
 * folded one on raw features. */
static void forward(const struct nd_model *m, int e, int k0, int k1, int rows, const double *a0,
                    const double *W1, const double *b1, double *work, double *E)
{
    const int nk = k1 - k0, L = m->nhidden;
    if (rows <= 0)
        return;
    double *a[ND_NET_MAX_HIDDEN + 1] = {0}, *s[ND_NET_MAX_HIDDEN + 1] = {0};
    double *p = work;
    for (int l = 1; l <= L; l++) {
        size_t sz = (size_t)rows * nk * m->width[l];
        a[l] = p;
        s[l] = p + sz;
        p += 2 * sz;
    }
    /* layer 1: all members at once, W1 rows k0*H1 .. k1*H1 */
    int H1 = m->width[1];
    start_from_bias(rows, (size_t)nk * H1, b1, a[1]);
    gemm_nt(rows, nk * H1, m->D, a0, m->D, W1, m->D, 1.0, a[1], nk * H1);
    activate(rows, nk, H1, a[1], s[1]);
    for (int l = 2; l <= L; l++) {
        int hin = m->width[l - 1], hout = m->width[l];
        start_from_bias(rows, (size_t)nk * hout, nd_net_bias(m, e, l, k0), a[l]);
        for (int k = 0; k < nk; k++)
            gemm_nt(rows, hout, hin, a[l - 1] + (size_t)k * hin, nk * hin,
                    nd_net_weights(m, e, l, k0 + k), hin, 1.0, a[l] + (size_t)k * hout, nk * hout);
        activate(rows, nk, hout, a[l], s[l]);
    }
    int HL = m->width[L];
    for (int r = 0; r < rows; r++) {
        const double *ar = a[L] + (size_t)r * nk * HL;
        for (int k = 0; k < nk; k++) {
            const double *w = nd_net_weights(m, e, L + 1, k0 + k);
            const double *x = ar + (size_t)k * HL;
            double sum = 0;
            for (int h = 0; h < HL; h++)
                sum += w[h] * x[h];
            E[(size_t)r * nk + k] = sum + nd_net_bias(m, e, L + 1, k0 + k)[0];
        }
    }
}

void nd_net_forward(const struct nd_model *m, int e, int k0, int k1, int rows, const double *a0,
                    double *work, double *E)
{
    forward(m, e, k0, k1, rows, a0, nd_net_weights(m, e, 1, k0), nd_net_bias(m, e, 1, k0), work,
            E);
}

void nd_net_forward_folded(const struct nd_model *m, int e, int k0, int k1, int rows,
                           const double *G, const double *W1, const double *b1, double *work,
                           double *E)
{
    forward(m, e, k0, k1, rows, G, W1, b1, work, E);
}

/* Backward pass with layer 1 given as W1 (as for forward); sc: the input
 * scaling to apply to U, or NULL when W1 has it folded in. */
static void backward(const struct nd_model *m, int e, int k0, int k1, int rows, double coef,
                     const double *W1, const double *sc, double *work, double *U)
{
    const int nk = k1 - k0, L = m->nhidden, D = m->D;
    if (rows <= 0)
        return;
    double *s[ND_NET_MAX_HIDDEN + 1];
    double *p = work;
    size_t mx = 1;
    for (int l = 1; l <= L; l++) {
        size_t w = (size_t)nk * m->width[l];
        s[l] = p + (size_t)rows * w;
        p += 2 * (size_t)rows * w;
        if (w > mx)
            mx = w;
    }
    double *cur = p, *nxt = p + (size_t)rows * mx;
    /* delta_L = coef * w * silu'(z_L) */
    int HL = m->width[L];
    for (int r = 0; r < rows; r++)
        for (int k = 0; k < nk; k++) {
            const double *w = nd_net_weights(m, e, L + 1, k0 + k);
            const double *sr = s[L] + (size_t)r * nk * HL + (size_t)k * HL;
            double *d = cur + (size_t)r * nk * HL + (size_t)k * HL;
            for (int h = 0; h < HL; h++)
                d[h] = coef * w[h] * sr[h];
        }
    for (int l = L; l >= 2; l--) {
        int hin = m->width[l - 1], hout = m->width[l];
        for (int k = 0; k < nk; k++)
            gemm_nn(rows, hin, hout, cur + (size_t)k * hout, nk * hout,
                    nd_net_weights(m, e, l, k0 + k), hin, 0.0, nxt + (size_t)k * hin, nk * hin);
        size_t n = (size_t)rows * nk * hin;
        const double *sl = s[l - 1];
        for (size_t c = 0; c < n; c++)
            nxt[c] *= sl[c];
        double *t = cur;
        cur = nxt;
        nxt = t;
    }
    int H1 = m->width[1];
    gemm_nn(rows, D, nk * H1, cur, nk * H1, W1, D, 0.0, U, D);
    if (!sc)
        return;
    for (int r = 0; r < rows; r++) {
        double *u = U + (size_t)r * D;
        for (int f = 0; f < D; f++)
            u[f] *= sc[f];
    }
}

void nd_net_backward(const struct nd_model *m, int e, int k0, int k1, int rows, double coef,
                     double *work, double *U)
{
    backward(m, e, k0, k1, rows, coef, nd_net_weights(m, e, 1, k0), m->scale + (size_t)e * m->D,
             work, U);
}

void nd_net_backward_folded(const struct nd_model *m, int e, int k0, int k1, int rows, double coef,
                            const double *W1, double *work, double *U)
{
    backward(m, e, k0, k1, rows, coef, W1, NULL, work, U);
}

void nd_net_fold_input(const struct nd_model *m, int e, double *W1, double *b1)
{
    const int D = m->D, rows = m->nmembers * m->width[1];
    const double *mu = m->mu + (size_t)e * D, *sc = m->scale + (size_t)e * D;
    const double *W = nd_net_weights(m, e, 1, 0), *b = nd_net_bias(m, e, 1, 0);
    for (int h = 0; h < rows; h++) {
        const double *w = W + (size_t)h * D;
        double *wf = W1 + (size_t)h * D, shift = 0;
        for (int f = 0; f < D; f++) {
            wf[f] = w[f] * sc[f];
            shift += wf[f] * mu[f];
        }
        b1[h] = b[h] - shift;
    }
}

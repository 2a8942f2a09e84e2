/* Per-element networks: forward and backward passes as one dgemm per layer
 * over all atoms of an element. See network.h for the layout.
 *
 * -fno-trapping-math lets GCC vectorise the activation loop (nd_exp has
 * comparisons); it changes no result. */
#pragma GCC optimize("no-trapping-math")
#include "potential/network.h"

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

/* Adds the bias and applies silu in place: z -> a, and s = silu'(z). The
 * logistic function takes exp(-z) from nd_exp (vectorised; within an ulp
 * of the C library's) with -z capped at 700, where 1 / (1 + e^700) is
 * already below 1e-304. The avx2 clone does the same IEEE operations four
 * at a time instead of two (no fused multiply-add in C11 mode): same bits. */
__attribute__((target_clones("avx2", "default"))) static void
activate(int rows, int nk, int w, const double *bias, double *a, double *s)
{
    size_t ld = (size_t)nk * w;
    for (int r = 0; r < rows; r++) {
        double *ar = a + (size_t)r * ld, *sr = s + (size_t)r * ld;
#pragma omp simd
        for (size_t c = 0; c < ld; c++) {
            double z = ar[c] + bias[c];
            double mz = -z < 700 ? -z : 700;
            double sg = 1 / (1 + nd_exp(mz));
            ar[c] = z * sg;
            sr[c] = sg * (1 + z * (1 - sg));
        }
    }
}

void nd_net_forward(const struct nd_model *m, int e, int k0, int k1, int rows, const double *a0,
                    double *work, double *E)
{
    const int nk = k1 - k0, L = m->nhidden;
    if (rows <= 0)
        return;
    double *a[ND_NET_MAX_HIDDEN + 1], *s[ND_NET_MAX_HIDDEN + 1];
    double *p = work;
    for (int l = 1; l <= L; l++) {
        size_t sz = (size_t)rows * nk * m->width[l];
        a[l] = p;
        s[l] = p + sz;
        p += 2 * sz;
    }
    /* layer 1: all members at once, W1 rows k0*H1 .. k1*H1 */
    int H1 = m->width[1];
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, rows, nk * H1, m->D, 1.0, a0, m->D,
                nd_net_weights(m, e, 1, k0), m->D, 0.0, a[1], nk * H1);
    activate(rows, nk, H1, nd_net_bias(m, e, 1, k0), a[1], s[1]);
    for (int l = 2; l <= L; l++) {
        int hin = m->width[l - 1], hout = m->width[l];
        for (int k = 0; k < nk; k++)
            cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, rows, hout, hin, 1.0,
                        a[l - 1] + (size_t)k * hin, nk * hin, nd_net_weights(m, e, l, k0 + k), hin,
                        0.0, a[l] + (size_t)k * hout, nk * hout);
        activate(rows, nk, hout, nd_net_bias(m, e, l, k0), a[l], s[l]);
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

void nd_net_backward(const struct nd_model *m, int e, int k0, int k1, int rows, double coef,
                     double *work, double *U)
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
            cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, rows, hin, hout, 1.0,
                        cur + (size_t)k * hout, nk * hout, nd_net_weights(m, e, l, k0 + k), hin,
                        0.0, nxt + (size_t)k * hin, nk * hin);
        size_t n = (size_t)rows * nk * hin;
        const double *sl = s[l - 1];
        for (size_t c = 0; c < n; c++)
            nxt[c] *= sl[c];
        double *t = cur;
        cur = nxt;
        nxt = t;
    }
    int H1 = m->width[1];
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, rows, D, nk * H1, 1.0, cur, nk * H1,
                nd_net_weights(m, e, 1, k0), D, 0.0, U, D);
    const double *sc = m->scale + (size_t)e * D;
    for (int r = 0; r < rows; r++) {
        double *u = U + (size_t)r * D;
        for (int f = 0; f < D; f++)
            u[f] *= sc[f];
    }
}

/* Tangent pass and its reverse through one member's network; see
 * net_tangent.h. Each layer is a few dgemms over all rows (OpenBLAS). */
#include "potential/net_tangent.h"

#include <cblas.h>
#include <math.h>
#include <string.h>

size_t nd_net_tangent_w_offset(const struct nd_model *m, int l)
{
    size_t off = 0;
    for (int q = 1; q < l; q++)
        off += (size_t)m->width[q] * (size_t)m->width[q - 1] + (size_t)m->width[q];
    return off;
}

size_t nd_net_tangent_b_offset(const struct nd_model *m, int l)
{
    return nd_net_tangent_w_offset(m, l) + (size_t)m->width[l] * (size_t)m->width[l - 1];
}

size_t nd_net_tangent_block_doubles(const struct nd_model *m)
{
    return nd_net_tangent_w_offset(m, m->nhidden + 2);
}

/* Largest hidden width. */
static int max_hidden(const struct nd_model *m)
{
    int mx = 1;
    for (int l = 1; l <= m->nhidden; l++)
        if (m->width[l] > mx)
            mx = m->width[l];
    return mx;
}

size_t nd_net_tangent_work_doubles(const struct nd_model *m, int rows)
{
    size_t sum = 0;
    for (int l = 1; l <= m->nhidden; l++)
        sum += 5 * (size_t)m->width[l];
    return (size_t)(rows > 0 ? rows : 1) * (sum + 6 * (size_t)max_hidden(m));
}

/* Per-layer views into work: a, silu', silu'', zdot, adot (rows x width[l]
 * each), then six rows x hmax reverse buffers. */
typedef struct views {
    double *a[ND_NET_MAX_HIDDEN + 1], *s1[ND_NET_MAX_HIDDEN + 1], *s2[ND_NET_MAX_HIDDEN + 1];
    double *zd[ND_NET_MAX_HIDDEN + 1], *ad[ND_NET_MAX_HIDDEN + 1];
    double *rev[6];
} views;

static void bind_views(const struct nd_model *m, int rows, double *work, views *v)
{
    double *p = work;
    for (int l = 1; l <= m->nhidden; l++) {
        size_t sz = (size_t)rows * (size_t)m->width[l];
        v->a[l] = p;
        v->s1[l] = p + sz;
        v->s2[l] = p + 2 * sz;
        v->zd[l] = p + 3 * sz;
        v->ad[l] = p + 4 * sz;
        p += 5 * sz;
    }
    size_t hm = (size_t)rows * (size_t)max_hidden(m);
    for (int q = 0; q < 6; q++)
        v->rev[q] = p + (size_t)q * hm;
}

void nd_net_tangent_primal(const struct nd_model *m, int e, int k, int rows, const double *a0,
                           double *work, double *E)
{
    if (rows <= 0)
        return;
    const int L = m->nhidden;
    views v;
    bind_views(m, rows, work, &v);
    const double *ain = a0;
    for (int l = 1; l <= L; l++) {
        int hin = m->width[l - 1], h = m->width[l];
        const double *W = nd_net_weights(m, e, l, k), *b = nd_net_bias(m, e, l, k);
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, rows, h, hin, 1.0, ain, hin, W, hin,
                    0.0, v.a[l], h);
        for (int r = 0; r < rows; r++) {
            double *ar = v.a[l] + (size_t)r * h, *s1 = v.s1[l] + (size_t)r * h,
                   *s2 = v.s2[l] + (size_t)r * h;
            for (int q = 0; q < h; q++)
                ar[q] = nd_net_silu(ar[q] + b[q], &s1[q], &s2[q]);
        }
        ain = v.a[l];
    }
    int HL = m->width[L];
    const double *w = nd_net_weights(m, e, L + 1, k), b = nd_net_bias(m, e, L + 1, k)[0];
    for (int r = 0; r < rows; r++) {
        const double *ar = v.a[L] + (size_t)r * HL;
        double se = 0;
        for (int h = 0; h < HL; h++)
            se += w[h] * ar[h];
        E[r] = se + b;
    }
}

void nd_net_tangent_input_grad(const struct nd_model *m, int e, int k, int rows, double *work,
                               double *U)
{
    if (rows <= 0)
        return;
    const int L = m->nhidden, D = m->D;
    views v;
    bind_views(m, rows, work, &v);
    double *cur = v.rev[0], *nxt = v.rev[1];
    int HL = m->width[L];
    const double *w = nd_net_weights(m, e, L + 1, k);
    for (int r = 0; r < rows; r++)
        for (int h = 0; h < HL; h++)
            cur[(size_t)r * HL + h] = w[h] * v.s1[L][(size_t)r * HL + h];
    for (int l = L; l >= 2; l--) {
        int hin = m->width[l - 1], h = m->width[l];
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, rows, hin, h, 1.0, cur, h,
                    nd_net_weights(m, e, l, k), hin, 0.0, nxt, hin);
        size_t n = (size_t)rows * (size_t)hin;
        for (size_t c = 0; c < n; c++)
            nxt[c] *= v.s1[l - 1][c];
        double *t = cur;
        cur = nxt;
        nxt = t;
    }
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, rows, D, m->width[1], 1.0, cur,
                m->width[1], nd_net_weights(m, e, 1, k), D, 0.0, U, D);
    const double *sc = m->scale + (size_t)e * D;
    for (int r = 0; r < rows; r++) {
        double *u = U + (size_t)r * D;
        for (int f = 0; f < D; f++)
            u[f] *= sc[f];
    }
}

void nd_net_tangent_push(const struct nd_model *m, int e, int k, int rows, const double *ad0,
                         double *work, double *T)
{
    if (rows <= 0)
        return;
    const int L = m->nhidden;
    views v;
    bind_views(m, rows, work, &v);
    const double *adin = ad0;
    for (int l = 1; l <= L; l++) {
        int hin = m->width[l - 1], h = m->width[l];
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, rows, h, hin, 1.0, adin, hin,
                    nd_net_weights(m, e, l, k), hin, 0.0, v.zd[l], h);
        size_t n = (size_t)rows * (size_t)h;
        for (size_t c = 0; c < n; c++)
            v.ad[l][c] = v.s1[l][c] * v.zd[l][c];
        adin = v.ad[l];
    }
    int HL = m->width[L];
    const double *w = nd_net_weights(m, e, L + 1, k);
    for (int r = 0; r < rows; r++) {
        const double *adr = v.ad[L] + (size_t)r * HL;
        double st = 0;
        for (int h = 0; h < HL; h++)
            st += w[h] * adr[h];
        T[r] = st;
    }
}

void nd_net_tangent_forward(const struct nd_model *m, int e, int k, int rows, const double *a0,
                            const double *ad0, double *work, double *E, double *T)
{
    nd_net_tangent_primal(m, e, k, rows, a0, work, E);
    if (ad0)
        nd_net_tangent_push(m, e, k, rows, ad0, work, T);
}

void nd_net_tangent_reverse(const struct nd_model *m, int e, int k, int rows, const double *a0,
                            const double *ad0, const double *cE, const double *cT, double *work,
                            double *grad)
{
    if (rows <= 0)
        return;
    const int L = m->nhidden, tan = ad0 != NULL;
    views v;
    bind_views(m, rows, work, &v);
    double *abar = v.rev[0], *adbar = v.rev[1], *zbar = v.rev[2], *zdbar = v.rev[3];
    double *abar2 = v.rev[4], *adbar2 = v.rev[5];
    /* output layer */
    int HL = m->width[L];
    const double *w = nd_net_weights(m, e, L + 1, k);
    double *gw = grad + nd_net_tangent_w_offset(m, L + 1), *gb = grad + nd_net_tangent_b_offset(m, L + 1);
    for (int r = 0; r < rows; r++) {
        const double *ar = v.a[L] + (size_t)r * HL;
        double ce = cE[r], ct = tan ? cT[r] : 0;
        for (int h = 0; h < HL; h++) {
            abar[(size_t)r * HL + h] = ce * w[h];
            gw[h] += ce * ar[h];
        }
        if (tan) {
            const double *adr = v.ad[L] + (size_t)r * HL;
            for (int h = 0; h < HL; h++) {
                adbar[(size_t)r * HL + h] = ct * w[h];
                gw[h] += ct * adr[h];
            }
        }
        gb[0] += ce;
    }
    for (int l = L; l >= 1; l--) {
        int hin = m->width[l - 1], h = m->width[l];
        size_t n = (size_t)rows * (size_t)h;
        const double *s1 = v.s1[l], *s2 = v.s2[l], *zd = v.zd[l];
        for (size_t c = 0; c < n; c++) {
            zbar[c] = abar[c] * s1[c];
            if (tan) {
                zbar[c] += adbar[c] * s2[c] * zd[c];
                zdbar[c] = adbar[c] * s1[c];
            }
        }
        const double *ain = l == 1 ? a0 : v.a[l - 1];
        const double *adin = l == 1 ? ad0 : v.ad[l - 1];
        double *gW = grad + nd_net_tangent_w_offset(m, l), *gB = grad + nd_net_tangent_b_offset(m, l);
        cblas_dgemm(CblasRowMajor, CblasTrans, CblasNoTrans, h, hin, rows, 1.0, zbar, h, ain, hin,
                    1.0, gW, hin);
        if (tan)
            cblas_dgemm(CblasRowMajor, CblasTrans, CblasNoTrans, h, hin, rows, 1.0, zdbar, h, adin,
                        hin, 1.0, gW, hin);
        for (int r = 0; r < rows; r++) {
            const double *zr = zbar + (size_t)r * h;
            for (int q = 0; q < h; q++)
                gB[q] += zr[q];
        }
        if (l > 1) {
            const double *W = nd_net_weights(m, e, l, k);
            cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, rows, hin, h, 1.0, zbar, h, W,
                        hin, 0.0, abar2, hin);
            if (tan)
                cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, rows, hin, h, 1.0, zdbar, h,
                            W, hin, 0.0, adbar2, hin);
            double *t = abar;
            abar = abar2;
            abar2 = t;
            t = adbar;
            adbar = adbar2;
            adbar2 = t;
        }
    }
}

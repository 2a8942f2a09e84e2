/* Angular features of the default sets, vectorised; see angular_default.h.
 *
 * -fno-trapping-math (as in descriptor.c) lets GCC turn the comparisons of
 * nd_exp into selects, -fno-math-errno lets it vectorise sqrt (correctly
 * rounded either way). Neither changes a result. The avx2 clones run the
 * same IEEE operations four at a time instead of two (C11 mode fuses no
 * multiply-add); only the reductions over neighbours split into four
 * partial sums instead of two, so the last bits may differ between
 * machines with and without AVX2, never between runs or thread counts. */
#pragma GCC optimize("no-trapping-math", "no-math-errno")
#include "potential/angular_default.h"

#include <math.h>
#include <string.h>

/* 2^(1 - zeta) of the five sets */
static const double NORM[5] = {1, 1, 0.125, 0.125, 0.5};

int nd_angular_is_default(const nd_descriptor_params *p)
{
    static const int zeta[5] = {1, 1, 4, 4, 2}, lambda[5] = {1, -1, 1, -1, 1};
    if (p->nangular != 5)
        return 0;
    for (int n = 0; n < 5; n++)
        if (p->angular_zeta[n] != zeta[n] || p->angular_lambda[n] != lambda[n])
            return 0;
    return p->angular_eta[1] == p->angular_eta[0] && p->angular_eta[2] == p->angular_eta[0] &&
           p->angular_eta[3] == p->angular_eta[0];
}

size_t nd_angular_default_scratch(int nel, int maxnn)
{
    size_t nn = (size_t)(maxnn > 0 ? maxnn : 1);
    return nn * (size_t)(8 + 5 + 5 * nel);
}

/* The neighbours of a centre inside the angular cutoff, grouped by element
 * (nbr order within an element), struct-of-arrays with one row of stride
 * (their count) doubles per quantity: their position in nbr, r, unit
 * vector (x_j - x_i) / r, e = exp(-eta r^2) fc(r) and de/dr for eta of
 * sets 0-3 (e0, d0) and of set 4 (e4, d4). extra: the rest of the scratch. */
typedef struct nbrs {
    int cnt, npresent;
    size_t stride;
    int block[ND_DESC_MAX_ELEMENTS + 1]; /* element z: block[z] .. block[z+1]-1 */
    int present[ND_DESC_MAX_ELEMENTS];   /* elements with neighbours, ascending */
    int *slot;
    double *r, *ux, *uy, *uz, *e0, *e4, *d0, *d4, *extra;
} nbrs;

/* Points the 8 rows of b (stride b->stride) into buf. */
static void bind_rows(nbrs *b, double *buf)
{
    size_t st = b->stride;
    b->r = buf;
    b->ux = buf + st;
    b->uy = buf + 2 * st;
    b->uz = buf + 3 * st;
    b->e0 = buf + 4 * st;
    b->e4 = buf + 5 * st;
    b->d0 = buf + 6 * st;
    b->d4 = buf + 7 * st;
}

/* Fills b, its 8 rows in rows (room for 8 nn doubles), slot in iscratch;
 * r2: nn doubles of temporary space apart from rows. b->extra is left for
 * the caller. The avx2 clone runs the vectorised loop (no reductions) four
 * at a time: same bits. */
__attribute__((target_clones("avx2", "default"))) static void setup(const nd_descriptor_params *p, int nel, const double *x, const int *species,
                  int i, const int *nbr, int nn, double *rows, double *r2, int *iscratch, nbrs *b)
{
    const double rca = p->angular_cutoff, rca2 = rca * rca;
    const double eta0 = p->angular_eta[0], eta4 = p->angular_eta[4];
    const double *xi = x + 3 * (size_t)i;
    int pos[ND_DESC_MAX_ELEMENTS + 1] = {0};
    for (int s = 0; s < nn; s++) {
        const double *xj = x + 3 * (size_t)nbr[s];
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        r2[s] = dx * dx + dy * dy + dz * dz;
        pos[species[nbr[s]] + 1] += r2[s] < rca2;
    }
    b->npresent = 0;
    for (int z = 0; z < nel; z++) {
        if (pos[z + 1] > 0)
            b->present[b->npresent++] = z;
        pos[z + 1] += pos[z];
    }
    memcpy(b->block, pos, sizeof(int) * (size_t)(nel + 1));
    b->cnt = pos[nel];
    size_t st = (size_t)(b->cnt > 0 ? b->cnt : 1);
    b->stride = st;
    b->slot = iscratch;
    bind_rows(b, rows);
    double *r = b->r, *ux = b->ux, *uy = b->uy, *uz = b->uz;
    double *e0 = b->e0, *e4 = b->e4, *d0 = b->d0, *d4 = b->d4;
    for (int s = 0; s < nn; s++) {
        if (!(r2[s] < rca2))
            continue;
        const double *xj = x + 3 * (size_t)nbr[s];
        int q = pos[species[nbr[s]]]++;
        b->slot[q] = s;
        r[q] = r2[s];
        ux[q] = xj[0] - xi[0];
        uy[q] = xj[1] - xi[1];
        uz[q] = xj[2] - xi[2];
    }
    const int cnt = b->cnt;
#pragma omp simd
    for (int q = 0; q < cnt; q++) {
        double rr2 = r[q], rr = sqrt(rr2), inv = 1 / rr;
        r[q] = rr;
        ux[q] *= inv;
        uy[q] *= inv;
        uz[q] *= inv;
        /* nd_descriptor_cutoff for r < rc */
        double t = rr / rca, v = 1 - t;
        double fc = v * v * v * (1 + 3 * t + 6 * t * t), dfc = -30 * t * t * v * v / rca;
        double x0 = nd_exp(-eta0 * rr2), x4 = nd_exp(-eta4 * rr2);
        e0[q] = x0 * fc;
        d0[q] = x0 * (dfc - 2 * eta0 * rr * fc);
        e4[q] = x4 * fc;
        d4[q] = x4 * (dfc - 2 * eta4 * rr * fc);
    }
}

/* The scratch-only set-up: rows at the start of scratch, r^2 after the 8
 * rows of any stride, the rest after the rows. */
static void setup_in_scratch(const nd_descriptor_params *p, int nel, const double *x,
                             const int *species, int i, const int *nbr, int nn, double *scratch,
                             int *iscratch, nbrs *b)
{
    setup(p, nel, x, species, i, nbr, nn, scratch, scratch + 8 * (size_t)(nn > 0 ? nn : 1),
          iscratch, b);
    b->extra = scratch + 8 * b->stride;
}

/* The set-up into kept rows (8 rows, then slot as doubles), scratch free. */
static void setup_kept(const nd_descriptor_params *p, int nel, const double *x, const int *species,
                       int i, const int *nbr, int nn, double *scratch, int *iscratch,
                       nd_angular_kept *kept, double *rows, nbrs *b)
{
    setup(p, nel, x, species, i, nbr, nn, rows, scratch, iscratch, b);
    b->extra = scratch;
    double *slot = rows + 8 * b->stride;
    for (int q = 0; q < b->cnt; q++)
        slot[q] = b->slot[q];
    kept->cnt = b->cnt;
    kept->npresent = b->npresent;
    memcpy(kept->block, b->block, sizeof kept->block);
    memcpy(kept->present, b->present, sizeof kept->present);
}

/* b from a kept set-up; slot back into iscratch. */
static void from_kept(const nd_angular_kept *kept, const double *rows, double *scratch,
                      int *iscratch, nbrs *b)
{
    b->cnt = kept->cnt;
    b->npresent = kept->npresent;
    memcpy(b->block, kept->block, sizeof b->block);
    memcpy(b->present, kept->present, sizeof b->present);
    b->stride = (size_t)(b->cnt > 0 ? b->cnt : 1);
    bind_rows(b, (double *)rows); /* read only from here on */
    const double *slot = rows + 8 * b->stride;
    for (int q = 0; q < b->cnt; q++)
        iscratch[q] = (int)slot[q];
    b->slot = iscratch;
    b->extra = scratch;
}

static void features(int nel, const nbrs *bp, double *GA);
static void grad(int nel, const nbrs *bp, const double *UA, double *gj);

void nd_angular_default_features(const nd_descriptor_params *p, int nel, const double *x,
                                 const int *species, int i, const int *nbr, int nn, double *GA,
                                 double *scratch, int *iscratch)
{
    nbrs b;
    setup_in_scratch(p, nel, x, species, i, nbr, nn, scratch, iscratch, &b);
    features(nel, &b, GA);
}

void nd_angular_default_features_keep(const nd_descriptor_params *p, int nel, const double *x,
                                      const int *species, int i, const int *nbr, int nn,
                                      double *GA, double *scratch, int *iscratch,
                                      nd_angular_kept *kept, double *rows)
{
    nbrs b;
    setup_kept(p, nel, x, species, i, nbr, nn, scratch, iscratch, kept, rows, &b);
    features(nel, &b, GA);
}

void nd_angular_default_grad(const nd_descriptor_params *p, int nel, const double *x,
                             const int *species, int i, const int *nbr, int nn, const double *UA,
                             double *gj, double *scratch, int *iscratch)
{
    nbrs b;
    setup_in_scratch(p, nel, x, species, i, nbr, nn, scratch, iscratch, &b);
    grad(nel, &b, UA, gj);
}

void nd_angular_default_grad_kept(const nd_descriptor_params *p, int nel, const double *x,
                                  const int *species, int i, const int *nbr, int nn,
                                  const double *UA, double *gj, double *scratch, int *iscratch,
                                  const nd_angular_kept *kept, const double *rows)
{
    nbrs b;
    if (kept && kept->cnt >= 0)
        from_kept(kept, rows, scratch, iscratch, &b);
    else
        setup_in_scratch(p, nel, x, species, i, nbr, nn, scratch, iscratch, &b);
    grad(nel, &b, UA, gj);
}

/* The feature sums of a set-up centre. */
__attribute__((target_clones("avx2", "default"))) static void
features(int nel, const nbrs *bp, double *GA)
{
    const nbrs b = *bp;
    const int cnt = b.cnt, np = b.npresent;
    const size_t st = b.stride;
    const double *ux = b.ux, *uy = b.uy, *uz = b.uz;
    /* F[A][n][q]: the sum over neighbours a < q of element present[A] of
     * e_a[n] (1 + lambda_n cos theta_aq)^zeta_n */
    double *F = b.extra;
    memset(F, 0, sizeof(double) * 5 * st * (size_t)np);
    for (int A = 0; A < np; A++) {
        int za = b.present[A];
        double *F0 = F + (size_t)A * 5 * st, *F1 = F0 + st, *F2 = F1 + st, *F3 = F2 + st,
               *F4 = F3 + st;
        for (int a = b.block[za]; a < b.block[za + 1]; a++) {
            double xa = ux[a], ya = uy[a], za_ = uz[a], ea0 = b.e0[a], ea4 = b.e4[a];
#pragma omp simd
            for (int q = a + 1; q < cnt; q++) {
                double c = xa * ux[q] + ya * uy[q] + za_ * uz[q];
                double p1 = 1 + c, m1 = 1 - c, p2 = p1 * p1, m2 = m1 * m1;
                F0[q] += ea0 * p1;
                F1[q] += ea0 * m1;
                F2[q] += ea0 * (p2 * p2);
                F3[q] += ea0 * (m2 * m2);
                F4[q] += ea4 * p2;
            }
        }
    }
    /* G[(z_a, z_q), n] += 2^(1 - zeta_n) e_q[n] F[A][n][q] */
    for (int B = 0; B < np; B++) {
        int zb = b.present[B];
        for (int q = b.block[zb]; q < b.block[zb + 1]; q++) {
            double eq0 = b.e0[q], eq4 = b.e4[q];
            for (int A = 0; A < np && b.block[b.present[A]] < q; A++) {
                const double *F0 = F + (size_t)A * 5 * st + (size_t)q;
                double *G = GA + (size_t)nd_angular_pair_index(b.present[A], zb, nel) * 5;
                G[0] += NORM[0] * eq0 * F0[0];
                G[1] += NORM[1] * eq0 * F0[st];
                G[2] += NORM[2] * eq0 * F0[2 * st];
                G[3] += NORM[3] * eq0 * F0[3 * st];
                G[4] += NORM[4] * eq4 * F0[4 * st];
            }
        }
    }
}

/* The gradient contraction of a set-up centre. */
__attribute__((target_clones("avx2", "default"))) static void
grad(int nel, const nbrs *bp, const double *UA, double *gj)
{
    const nbrs b = *bp;
    const int cnt = b.cnt, np = b.npresent;
    const size_t st = b.stride;
    const double *ux = b.ux, *uy = b.uy, *uz = b.uz, *e0 = b.e0, *e4 = b.e4;
    /* per neighbour q the sums {dT/dr_q, dT/dcos . u_other (3), dT/dcos cos},
     * then W[A][n][q] = 2^(1 - zeta_n) u[(present[A], z_q), n] */
    double *acc = b.extra, *W = acc + 5 * st;
    memset(acc, 0, sizeof(double) * 5 * st);
    for (int A = 0; A < np; A++)
        for (int B = 0; B < np; B++) {
            int zb = b.present[B];
            const double *U = UA + (size_t)nd_angular_pair_index(b.present[A], zb, nel) * 5;
            for (int n = 0; n < 5; n++) {
                double w = NORM[n] * U[n], *Wn = W + ((size_t)A * 5 + (size_t)n) * st;
                for (int q = b.block[zb]; q < b.block[zb + 1]; q++)
                    Wn[q] = w;
            }
        }
    double *a0 = acc, *a1 = a0 + st, *a2 = a1 + st, *a3 = a2 + st, *a4 = a3 + st;
    for (int A = 0; A < np; A++) {
        int za = b.present[A];
        const double *W0 = W + (size_t)A * 5 * st, *W1 = W0 + st, *W2 = W1 + st, *W3 = W2 + st,
                     *W4 = W3 + st;
        for (int a = b.block[za]; a < b.block[za + 1]; a++) {
            double xa = ux[a], ya = uy[a], za_ = uz[a];
            double ea0 = e0[a], ea4 = e4[a], da0 = b.d0[a], da4 = b.d4[a];
            double s0 = 0, s1 = 0, s2 = 0, s3 = 0, s4 = 0;
#pragma omp simd reduction(+ : s0, s1, s2, s3, s4)
            for (int q = a + 1; q < cnt; q++) {
                double c = xa * ux[q] + ya * uy[q] + za_ * uz[q];
                double p1 = 1 + c, m1 = 1 - c, p2 = p1 * p1, m2 = m1 * m1;
                double p3 = p2 * p1, m3 = m2 * m1, p4 = p2 * p2, m4 = m2 * m2;
                double w0 = W0[q], w1 = W1[q], w2 = W2[q], w3 = W3[q], w4 = W4[q];
                /* the weighted angular terms of sets 0-3 and 4 (Q, R) and
                 * their derivatives in cos theta (Qc, Rc) */
                double Q = w0 * p1 + w1 * m1 + w2 * p4 + w3 * m4, R = w4 * p2;
                double Qc = (w0 - w1) + 4 * (w2 * p3 - w3 * m3), Rc = 2 * w4 * p1;
                double eq0 = e0[q], eq4 = e4[q];
                /* dT/dcos, dT/dr_a, dT/dr_q */
                double Ad = ea0 * eq0 * Qc + ea4 * eq4 * Rc;
                double Ba = da0 * eq0 * Q + da4 * eq4 * R;
                double Bq = ea0 * b.d0[q] * Q + ea4 * b.d4[q] * R;
                double Ac = Ad * c;
                s0 += Ba;
                s1 += Ad * ux[q];
                s2 += Ad * uy[q];
                s3 += Ad * uz[q];
                s4 += Ac;
                a0[q] += Bq;
                a1[q] += Ad * xa;
                a2[q] += Ad * ya;
                a3[q] += Ad * za_;
                a4[q] += Ac;
            }
            a0[a] += s0;
            a1[a] += s1;
            a2[a] += s2;
            a3[a] += s3;
            a4[a] += s4;
        }
    }
    /* x_q moves r along u and u by (I - u u^T) / r: d cos_aq / d x_q =
     * (u_a - cos u_q) / r_q, summed over a with the weights dT/dcos */
    for (int q = 0; q < cnt; q++) {
        double u[3] = {ux[q], uy[q], uz[q]}, s[3] = {a1[q], a2[q], a3[q]}, inv = 1 / b.r[q];
        double *gg = gj + 3 * (size_t)b.slot[q];
        for (int k = 0; k < 3; k++)
            gg[k] += a0[q] * u[k] + (s[k] - a4[q] * u[k]) * inv;
    }
}

/* Forward-mode tangent of the symmetry functions: v_i = sum_k J_ik r_k.
 * See descriptor_tangent.h; the functions differentiated are those of
 * descriptor.h (radial Gaussians, the G5 angular form, the quintic cutoff). */
#include "potential/descriptor_tangent.h"

#include <math.h>
#include <string.h>

/* base^k for a small positive integer k. */
static inline double ipow(double base, int k)
{
    double r = 1;
    for (int i = 0; i < k; i++)
        r *= base;
    return r;
}

/* Index of the unordered element pair (a, b) among nel elements (the layout
 * of descriptor.h). */
static inline int pair_index(int a, int b, int nel)
{
    if (a > b) {
        int t = a;
        a = b;
        b = t;
    }
    return a * nel - a * (a - 1) / 2 + (b - a);
}

/* Neighbours of i inside the angular cutoff: per neighbour geo = (r, unit
 * vector), dr = d r_ij along the tangent, then per angular set
 * e = exp(-eta r^2) fc(r) and de/dr; islot is the position in nbr. Returns
 * their number. */
static int angular_setup(const nd_descriptor_params *p, const double *x, const double *rt, int i,
                         const int *nbr, int nn, double *geo, double *e, double *de, int *islot)
{
    const double rca2 = p->angular_cutoff * p->angular_cutoff;
    const int na = p->nangular;
    const double *xi = x + 3 * (size_t)i, *ri = rt + 3 * (size_t)i;
    int cnt = 0;
    for (int s = 0; s < nn; s++) {
        const double *xj = x + 3 * (size_t)nbr[s], *rj = rt + 3 * (size_t)nbr[s];
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        double r2 = dx * dx + dy * dy + dz * dz;
        if (r2 >= rca2)
            continue;
        double r = sqrt(r2), inv = 1 / r, dfc;
        double fc = nd_descriptor_cutoff(r, p->angular_cutoff, &dfc, NULL);
        double *gg = geo + 8 * (size_t)cnt;
        gg[0] = r;
        gg[1] = dx * inv;
        gg[2] = dy * inv;
        gg[3] = dz * inv;
        gg[4] = rj[0] - ri[0]; /* relative displacement of the pair */
        gg[5] = rj[1] - ri[1];
        gg[6] = rj[2] - ri[2];
        gg[7] = gg[1] * gg[4] + gg[2] * gg[5] + gg[3] * gg[6]; /* d r */
        double *ee = e + (size_t)cnt * na, *dd = de + (size_t)cnt * na;
        for (int n = 0; n < na; n++) {
            double ex = exp(-p->angular_eta[n] * r2);
            ee[n] = ex * fc;
            dd[n] = ex * (dfc - 2 * p->angular_eta[n] * r * fc);
        }
        islot[cnt++] = s;
    }
    return cnt;
}

size_t nd_descriptor_tangent_scratch_doubles(const nd_descriptor_params *p, int maxnn)
{
    return (size_t)(maxnn > 0 ? maxnn : 1) * (size_t)(8 + 2 * p->nangular);
}

void nd_descriptor_atom_tangent(const nd_descriptor_params *p, int nel, const double *x,
                                const int *species, int i, const int *nbr, int nn, const double *r,
                                double *v, double *dscratch, int *iscratch)
{
    const int nr = p->nradial, na = p->nangular;
    const int D = nd_descriptor_size(p, nel);
    memset(v, 0, sizeof(double) * (size_t)D);
    const double rc = p->radial_cutoff, rc2 = rc * rc;
    const double *xi = x + 3 * (size_t)i, *ri = r + 3 * (size_t)i;
    for (int s = 0; s < nn; s++) {
        int j = nbr[s];
        const double *xj = x + 3 * (size_t)j, *rj = r + 3 * (size_t)j;
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        double d2 = dx * dx + dy * dy + dz * dz;
        if (d2 >= rc2)
            continue;
        double rr = sqrt(d2), dfc;
        double fc = nd_descriptor_cutoff(rr, rc, &dfc, NULL);
        double drr = (dx * (rj[0] - ri[0]) + dy * (rj[1] - ri[1]) + dz * (rj[2] - ri[2])) / rr;
        double *vv = v + (size_t)species[j] * nr;
        for (int m = 0; m < nr; m++) {
            double d = rr - p->radial_shift[m];
            double ex = exp(-p->radial_eta[m] * d * d);
            vv[m] += ex * (dfc - 2 * p->radial_eta[m] * d * fc) * drr;
        }
    }
    if (na == 0)
        return;
    double *geo = dscratch;
    double *e = geo + 8 * (size_t)nn, *de = e + (size_t)nn * na;
    int cnt = angular_setup(p, x, r, i, nbr, nn, geo, e, de, iscratch);
    double *VA = v + (size_t)nel * nr;
    double norm[ND_DESC_MAX_ANGULAR];
    for (int n = 0; n < na; n++)
        norm[n] = ldexp(1.0, 1 - p->angular_zeta[n]);
    for (int a = 0; a < cnt; a++) {
        const double *ga = geo + 8 * (size_t)a, *ea = e + (size_t)a * na, *dea = de + (size_t)a * na;
        int za = species[nbr[iscratch[a]]];
        for (int b = a + 1; b < cnt; b++) {
            const double *gb = geo + 8 * (size_t)b, *eb = e + (size_t)b * na,
                         *deb = de + (size_t)b * na;
            int zb = species[nbr[iscratch[b]]];
            double c = ga[1] * gb[1] + ga[2] * gb[2] + ga[3] * gb[3];
            /* d cos = (u_b - c u_a) . dr_a / r_a + (u_a - c u_b) . dr_b / r_b */
            double dc = 0;
            for (int k = 0; k < 3; k++)
                dc += (gb[1 + k] - c * ga[1 + k]) * ga[4 + k] / ga[0] +
                      (ga[1 + k] - c * gb[1 + k]) * gb[4 + k] / gb[0];
            double *vv = VA + (size_t)pair_index(za, zb, nel) * na;
            for (int n = 0; n < na; n++) {
                int zeta = p->angular_zeta[n];
                double lam = p->angular_lambda[n];
                double base = 1 + lam * c;
                double pw1 = ipow(base, zeta - 1), pw = pw1 * base;
                vv[n] += norm[n] * (zeta * lam * pw1 * dc * ea[n] * eb[n] +
                                    pw * (dea[n] * eb[n] * ga[7] + ea[n] * deb[n] * gb[7]));
            }
        }
    }
}

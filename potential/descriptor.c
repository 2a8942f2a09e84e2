/* Behler-Parrinello symmetry functions and their contracted derivatives.
 * See descriptor.h for the definitions and the feature layout. */
#include "potential/descriptor.h"

#include <math.h>
#include <stddef.h>
#include <string.h>

void nd_descriptor_defaults(nd_descriptor_params *p)
{
    memset(p, 0, sizeof *p);
    p->radial_cutoff = 5.2;
    p->nradial = 10;
    double lo = 0.8, hi = 4.7, d = (hi - lo) / 9.0;
    for (int m = 0; m < p->nradial; m++) {
        p->radial_shift[m] = lo + d * m;
        p->radial_eta[m] = 4.0 * log(2.0) / (d * d);
    }
    p->angular_cutoff = 3.5;
    p->nangular = 5;
    static const double eta[5] = {0.05, 0.05, 0.05, 0.05, 0.4};
    static const int zeta[5] = {1, 1, 4, 4, 2};
    static const int lambda[5] = {1, -1, 1, -1, 1};
    for (int n = 0; n < 5; n++) {
        p->angular_eta[n] = eta[n];
        p->angular_zeta[n] = zeta[n];
        p->angular_lambda[n] = lambda[n];
    }
}

int nd_descriptor_check(const nd_descriptor_params *p, nd_error *err)
{
    if (!(p->radial_cutoff > 0 && isfinite(p->radial_cutoff) && p->radial_cutoff <= 50))
        return nd_fail(err, ND_EINPUT, "descriptor: radial cutoff %g is not in (0, 50] angstrom",
                       p->radial_cutoff);
    if (p->nradial < 1 || p->nradial > ND_DESC_MAX_RADIAL)
        return nd_fail(err, ND_EINPUT, "descriptor: %d radial functions, expected 1 to %d",
                       p->nradial, ND_DESC_MAX_RADIAL);
    if (p->nangular < 0 || p->nangular > ND_DESC_MAX_ANGULAR)
        return nd_fail(err, ND_EINPUT, "descriptor: %d angular sets, expected 0 to %d",
                       p->nangular, ND_DESC_MAX_ANGULAR);
    if (p->nangular > 0 && !(p->angular_cutoff > 0 && p->angular_cutoff <= p->radial_cutoff))
        return nd_fail(err, ND_EINPUT,
                       "descriptor: angular cutoff %g must be positive and at most the radial "
                       "cutoff %g",
                       p->angular_cutoff, p->radial_cutoff);
    for (int m = 0; m < p->nradial; m++)
        if (!(p->radial_eta[m] > 0 && isfinite(p->radial_eta[m])) || !isfinite(p->radial_shift[m]))
            return nd_fail(err, ND_EINPUT, "descriptor: radial function %d has eta %g, shift %g",
                           m + 1, p->radial_eta[m], p->radial_shift[m]);
    for (int n = 0; n < p->nangular; n++) {
        if (!(p->angular_eta[n] >= 0 && isfinite(p->angular_eta[n])))
            return nd_fail(err, ND_EINPUT, "descriptor: angular set %d has eta %g", n + 1,
                           p->angular_eta[n]);
        if (p->angular_zeta[n] < 1 || p->angular_zeta[n] > ND_DESC_MAX_ZETA)
            return nd_fail(err, ND_EINPUT,
                           "descriptor: angular set %d has zeta %d, expected an integer 1 to %d",
                           n + 1, p->angular_zeta[n], ND_DESC_MAX_ZETA);
        if (p->angular_lambda[n] != 1 && p->angular_lambda[n] != -1)
            return nd_fail(err, ND_EINPUT, "descriptor: angular set %d has lambda %d, expected +1 or -1",
                           n + 1, p->angular_lambda[n]);
    }
    return ND_OK;
}

int nd_descriptor_size(const nd_descriptor_params *p, int nel)
{
    return nel * p->nradial + nel * (nel + 1) / 2 * p->nangular;
}

double nd_descriptor_cutoff(double r, double rc, double *d1, double *d2)
{
    if (r >= rc) {
        if (d1)
            *d1 = 0;
        if (d2)
            *d2 = 0;
        return 0;
    }
    double t = r / rc, u = 1 - t;
    if (d1)
        *d1 = -30 * t * t * u * u / rc;
    if (d2)
        *d2 = -60 * t * u * (1 - 2 * t) / (rc * rc);
    return u * u * u * (1 + 3 * t + 6 * t * t);
}

size_t nd_descriptor_scratch_doubles(const nd_descriptor_params *p, int nel, int maxnn)
{
    size_t nn = (size_t)(maxnn > 0 ? maxnn : 1);
    return nn * (size_t)(4 + 2 * p->nangular + 6) +
           2 * (size_t)(nel * (nel + 1) / 2) * (size_t)p->nangular;
}

/* Gathers the neighbours of i inside the angular cutoff, grouped by element
 * slot (stable: nbr order within a slot): their position in nbr (islot),
 * and per neighbour r, the unit vector, then per angular set
 * e = exp(-eta r^2) fc(r) and de/dr. block[z] .. block[z+1]-1 are the
 * neighbours of slot z. tmp: nn doubles. Returns their number. */
static int angular_setup(const nd_descriptor_params *p, int nel, const double *x,
                         const int *species, int i, const int *nbr, int nn, double *geo, double *e,
                         double *de, int *islot, int *block, double *tmp)
{
    const double rca2 = p->angular_cutoff * p->angular_cutoff;
    const int na = p->nangular;
    const double *xi = x + 3 * (size_t)i;
    int count[ND_DESC_MAX_ELEMENTS + 1] = {0};
    int cnt = 0;
    for (int s = 0; s < nn; s++) {
        const double *xj = x + 3 * (size_t)nbr[s];
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        if (dx * dx + dy * dy + dz * dz < rca2) {
            tmp[cnt++] = s;
            count[species[nbr[s]] + 1]++;
        }
    }
    for (int z = 0; z < nel; z++)
        count[z + 1] += count[z];
    for (int z = 0; z <= nel; z++)
        block[z] = count[z];
    for (int q = 0; q < cnt; q++) {
        int s = (int)tmp[q];
        islot[count[species[nbr[s]]]++] = s;
    }
    for (int q = 0; q < cnt; q++) {
        int s = islot[q];
        const double *xj = x + 3 * (size_t)nbr[s];
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        double r2 = dx * dx + dy * dy + dz * dz;
        double r = sqrt(r2), inv = 1 / r, dfc;
        double fc = nd_descriptor_cutoff(r, p->angular_cutoff, &dfc, NULL);
        double *gg = geo + 4 * (size_t)q;
        gg[0] = r;
        gg[1] = dx * inv;
        gg[2] = dy * inv;
        gg[3] = dz * inv;
        double *ee = e + (size_t)q * na, *dd = de + (size_t)q * na;
        for (int n = 0; n < na; n++) {
            if (n > 0 && p->angular_eta[n] == p->angular_eta[n - 1]) {
                ee[n] = ee[n - 1];
                dd[n] = dd[n - 1];
                continue;
            }
            double ex = exp(-p->angular_eta[n] * r2);
            ee[n] = ex * fc;
            dd[n] = ex * (dfc - 2 * p->angular_eta[n] * r * fc);
        }
    }
    return cnt;
}

/* (1 - c)^k into t[k] and (1 + c)^k into t[ZS + k], k = 0 .. zmax, with
 * ZS = ND_DESC_MAX_ZETA + 1. */
#define ZS (ND_DESC_MAX_ZETA + 1)
static inline void cos_powers(double c, int zmax, double *t)
{
    t[0] = t[ZS] = 1;
    double lo = 1 - c, hi = 1 + c;
    for (int k = 1; k <= zmax; k++) {
        t[k] = t[k - 1] * lo;
        t[ZS + k] = t[ZS + k - 1] * hi;
    }
}

/* Sums over the neighbours b0 .. b1-1 of one element block (forward):
 * S[n] = sum_b (1 + lambda_n c_ab)^zeta_n e_b[n]. Inlined so that the
 * default sizes become constants. */
static inline __attribute__((always_inline)) void
fwd_block(int na, int zmax, const int *off, const double *ga, const double *geo, const double *e,
          int b0, int b1, double *S)
{
    for (int n = 0; n < na; n++)
        S[n] = 0;
    for (int b = b0; b < b1; b++) {
        const double *gb = geo + 4 * (size_t)b, *eb = e + (size_t)b * na;
        double c = ga[1] * gb[1] + ga[2] * gb[2] + ga[3] * gb[3];
        double t[2 * ZS];
        cos_powers(c, zmax, t);
        for (int n = 0; n < na; n++)
            S[n] += t[off[n]] * eb[n];
    }
}

/* The contraction over one element block of neighbours b of a: per pair
 * the derivatives of the weighted angular sum with respect to cos theta
 * (A) and the two distances (Ba, Bb), accumulated into the sums of a (aa)
 * and b (acc + 5b): {B, A u_other (3), A c}. */
static inline __attribute__((always_inline)) void
grad_block(int na, int zmax, const int *off, const double *ga, const double *geo, const double *e,
           const double *de, const double *ha, const double *hb, const double *hc, double *aa,
           double *acc, int b0, int b1)
{
    for (int b = b0; b < b1; b++) {
        const double *gb = geo + 4 * (size_t)b, *eb = e + (size_t)b * na,
                     *deb = de + (size_t)b * na;
        double c = ga[1] * gb[1] + ga[2] * gb[2] + ga[3] * gb[3];
        double t[2 * ZS];
        cos_powers(c, zmax, t);
        double A = 0, Ba = 0, Bb = 0; /* dT/dcos, dT/dr_a, dT/dr_b */
        for (int n = 0; n < na; n++) {
            double pw1 = t[off[n] - 1], pw = t[off[n]];
            A += ha[n] * pw1 * eb[n];
            Ba += hb[n] * pw * eb[n];
            Bb += hc[n] * pw * deb[n];
        }
        double *bb = acc + 5 * (size_t)b;
        double Ac = A * c;
        aa[0] += Ba;
        aa[1] += A * gb[1];
        aa[2] += A * gb[2];
        aa[3] += A * gb[3];
        aa[4] += Ac;
        bb[0] += Bb;
        bb[1] += A * ga[1];
        bb[2] += A * ga[2];
        bb[3] += A * ga[3];
        bb[4] += Ac;
    }
}

/* The radial Gaussians g_m = exp(-eta_m (r - s_m)^2) for m = 0 .. nr-1.
 * When every eta is the same and the centres are evenly spaced (our
 * defaults), they come from three exponentials by the exact recurrence
 * g_{m+1} = g_m rho_m, rho_{m+1} = rho_m kappa (rho_m = exp(-eta d (2 (s_m - r) + d)),
 * kappa = exp(-2 eta d^2)), started at the centre nearest r and run both
 * ways, so nothing overflows and only negligible values underflow; the
 * result agrees with direct evaluation to a few ulps. Otherwise each is
 * evaluated directly. */
static void radial_gaussians(const nd_descriptor_params *p, int uniform, double kappa, double r,
                             double *g)
{
    const int nr = p->nradial;
    if (!uniform) {
        for (int m = 0; m < nr; m++) {
            double d = r - p->radial_shift[m];
            g[m] = exp(-p->radial_eta[m] * d * d);
        }
        return;
    }
    const double eta = p->radial_eta[0], s0 = p->radial_shift[0];
    const double dlt = nr > 1 ? p->radial_shift[1] - s0 : 1;
    int c = (int)floor((r - s0) / dlt + 0.5);
    if (c < 0)
        c = 0;
    if (c > nr - 1)
        c = nr - 1;
    double sc = p->radial_shift[c], u = r - sc;
    g[c] = exp(-eta * u * u);
    double up = 0;
    if (c + 1 < nr) {
        double rho = up = exp(-eta * dlt * (dlt - 2 * u)); /* g_{c+1} / g_c */
        for (int m = c + 1; m < nr; m++) {
            g[m] = g[m - 1] * rho;
            rho *= kappa;
        }
    }
    if (c > 0) {
        /* g_{c-1} / g_c = exp(-eta d (d + 2u)); inside the grid |u| <= d/2,
         * so it equals kappa / up with up well away from 0 */
        double rho = c + 1 < nr ? kappa / up : exp(-eta * dlt * (dlt + 2 * u));
        for (int m = c - 1; m >= 0; m--) {
            g[m] = g[m + 1] * rho;
            rho *= kappa;
        }
    }
}

/* Whether the radial set is uniform (one eta, evenly spaced centres to
 * 1e-12 relative); *kappa = exp(-2 eta d^2) then. */
static int radial_uniform(const nd_descriptor_params *p, double *kappa)
{
    const int nr = p->nradial;
    *kappa = 1;
    if (nr < 3)
        return 0;
    double d = p->radial_shift[1] - p->radial_shift[0];
    if (!(d > 0))
        return 0;
    for (int m = 1; m < nr; m++) {
        if (p->radial_eta[m] != p->radial_eta[0])
            return 0;
        double dm = p->radial_shift[m] - p->radial_shift[m - 1];
        if (fabs(dm - d) > 1e-12 * d)
            return 0;
    }
    *kappa = exp(-2 * p->radial_eta[0] * d * d);
    return 1;
}

/* Index of the unordered element pair (a, b) among nel elements. */
static inline int pair_index(int a, int b, int nel)
{
    if (a > b) {
        int t = a;
        a = b;
        b = t;
    }
    return a * nel - a * (a - 1) / 2 + (b - a);
}

void nd_descriptor_atom(const nd_descriptor_params *p, int nel, const double *x, const int *species,
                        int i, const int *nbr, int nn, double *G, double *dscratch, int *iscratch)
{
    const int nr = p->nradial, na = p->nangular;
    const int D = nd_descriptor_size(p, nel);
    memset(G, 0, sizeof(double) * (size_t)D);
    const double rc = p->radial_cutoff, rc2 = rc * rc;
    const double *xi = x + 3 * (size_t)i;
    double kappa, gm[ND_DESC_MAX_RADIAL];
    int uni = radial_uniform(p, &kappa);
    for (int s = 0; s < nn; s++) {
        int j = nbr[s];
        const double *xj = x + 3 * (size_t)j;
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        double r2 = dx * dx + dy * dy + dz * dz;
        if (r2 >= rc2)
            continue;
        double r = sqrt(r2);
        double fc = nd_descriptor_cutoff(r, rc, NULL, NULL);
        double *g = G + (size_t)species[j] * nr;
        radial_gaussians(p, uni, kappa, r, gm);
        for (int m = 0; m < nr; m++)
            g[m] += gm[m] * fc;
    }
    if (na == 0)
        return;
    double *geo = dscratch, *e = geo + 4 * (size_t)nn, *de = e + (size_t)nn * na;
    double *tmp = de + (size_t)nn * na;
    int block[ND_DESC_MAX_ELEMENTS + 1];
    int cnt = angular_setup(p, nel, x, species, i, nbr, nn, geo, e, de, iscratch, block, tmp);
    double *GA = G + (size_t)nel * nr;
    double norm[ND_DESC_MAX_ANGULAR];
    int zmax = 0, off[ND_DESC_MAX_ANGULAR];
    for (int n = 0; n < na; n++) {
        norm[n] = ldexp(1.0, 1 - p->angular_zeta[n]);
        zmax = p->angular_zeta[n] > zmax ? p->angular_zeta[n] : zmax;
        off[n] = (p->angular_lambda[n] > 0 ? ZS : 0) + p->angular_zeta[n];
    }
    /* for each neighbour a and each element block of neighbours b > a, sum
     * over b first, then scale by the factors of a */
    int za = 0;
    for (int a = 0; a < cnt; a++) {
        while (a >= block[za + 1])
            za++;
        const double *ga = geo + 4 * (size_t)a, *ea = e + (size_t)a * na;
        for (int zb = za; zb < nel; zb++) {
            int b0 = block[zb] > a + 1 ? block[zb] : a + 1, b1 = block[zb + 1];
            if (b0 >= b1)
                continue;
            double S[ND_DESC_MAX_ANGULAR];
            if (na == 5 && zmax == 4) /* the default set, with constant loop bounds */
                fwd_block(5, 4, off, ga, geo, e, b0, b1, S);
            else
                fwd_block(na, zmax, off, ga, geo, e, b0, b1, S);
            double *g = GA + (size_t)pair_index(za, zb, nel) * na;
            for (int n = 0; n < na; n++)
                g[n] += norm[n] * ea[n] * S[n];
        }
    }
}

/* Shared body of the two contraction calls. With U == NULL, the radial
 * term of every pair uses u (the row of atom i). With U (rows of all atoms,
 * row[atom] their row, D features), the radial terms of the pair (i, j) for
 * both centres are done here when i < j, from the one set of Gaussians, and
 * skipped when i > j (atom j does them). */
static void atom_grad(const nd_descriptor_params *p, int nel, const double *x, const int *species,
                      int i, const int *nbr, int nn, const double *u, const double *U,
                      const int *row, int D, double *gi, double *gj, double *dscratch,
                      int *iscratch)
{
    const int nr = p->nradial, na = p->nangular;
    const double rc = p->radial_cutoff, rc2 = rc * rc;
    const double *xi = x + 3 * (size_t)i;
    if (nn > 0)
        memset(gj, 0, sizeof(double) * 3 * (size_t)nn);
    double kappa, gm[ND_DESC_MAX_RADIAL];
    int uni = radial_uniform(p, &kappa);
    for (int s = 0; s < nn; s++) {
        int j = nbr[s];
        const double *xj = x + 3 * (size_t)j;
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        double r2 = dx * dx + dy * dy + dz * dz;
        if (r2 >= rc2)
            continue;
        double r = sqrt(r2), dfc;
        if (U && j < i)
            continue;
        double fc = nd_descriptor_cutoff(r, rc, &dfc, NULL);
        double uu[ND_DESC_MAX_RADIAL];
        const double *ui = u + (size_t)species[j] * nr;
        if (U) {
            const double *uj = U + (size_t)row[j] * D + (size_t)species[i] * nr;
            for (int m = 0; m < nr; m++)
                uu[m] = ui[m] + uj[m];
        } else {
            for (int m = 0; m < nr; m++)
                uu[m] = ui[m];
        }
        double dedr = 0;
        radial_gaussians(p, uni, kappa, r, gm);
        for (int m = 0; m < nr; m++) {
            double d = r - p->radial_shift[m];
            dedr += uu[m] * gm[m] * (dfc - 2 * p->radial_eta[m] * d * fc);
        }
        double f = dedr / r;
        gj[3 * s + 0] = f * dx;
        gj[3 * s + 1] = f * dy;
        gj[3 * s + 2] = f * dz;
    }
    if (na > 0) {
        /* scratch: geometry, e, de, tmp, then per angular neighbour the sums
         * {sum B, sum A u_other (3), sum A c}, then the per-pair-kind weights */
        double *geo = dscratch, *e = geo + 4 * (size_t)nn, *de = e + (size_t)nn * na;
        double *tmp = de + (size_t)nn * na, *acc = tmp + nn;
        const int npair = nel * (nel + 1) / 2;
        double *wa = acc + 5 * (size_t)nn, *wb = wa + (size_t)npair * na;
        int block[ND_DESC_MAX_ELEMENTS + 1];
        int cnt = angular_setup(p, nel, x, species, i, nbr, nn, geo, e, de, iscratch, block, tmp);
        const double *UA = u + (size_t)nel * nr;
        int zmax = 0, off[ND_DESC_MAX_ANGULAR];
        for (int n = 0; n < na; n++) {
            zmax = p->angular_zeta[n] > zmax ? p->angular_zeta[n] : zmax;
            off[n] = (p->angular_lambda[n] > 0 ? ZS : 0) + p->angular_zeta[n];
        }
        /* wb = 2^(1-zeta) u, wa = wb zeta lambda, per pair kind and set */
        double norm[ND_DESC_MAX_ANGULAR], zl[ND_DESC_MAX_ANGULAR];
        for (int n = 0; n < na; n++) {
            norm[n] = ldexp(1.0, 1 - p->angular_zeta[n]);
            zl[n] = norm[n] * p->angular_zeta[n] * p->angular_lambda[n];
        }
        for (int q = 0; q < npair; q++)
            for (int n = 0; n < na; n++) {
                double uq = UA[(size_t)q * na + n];
                wb[(size_t)q * na + n] = uq * norm[n];
                wa[(size_t)q * na + n] = uq * zl[n];
            }
        memset(acc, 0, sizeof(double) * 5 * (size_t)(cnt > 0 ? cnt : 1));
        int za = 0;
        for (int a = 0; a < cnt; a++) {
            while (a >= block[za + 1])
                za++;
            const double *ga = geo + 4 * (size_t)a, *ea = e + (size_t)a * na,
                         *dea = de + (size_t)a * na;
            double *aa = acc + 5 * (size_t)a;
            for (int zb = za; zb < nel; zb++) {
                int b0 = block[zb] > a + 1 ? block[zb] : a + 1, b1 = block[zb + 1];
                if (b0 >= b1)
                    continue;
                size_t q = (size_t)pair_index(za, zb, nel) * na;
                /* factors of a, hoisted out of the loop over b */
                double ha[ND_DESC_MAX_ANGULAR], hb[ND_DESC_MAX_ANGULAR], hc[ND_DESC_MAX_ANGULAR];
                for (int n = 0; n < na; n++) {
                    ha[n] = wa[q + n] * ea[n];
                    hb[n] = wb[q + n] * dea[n];
                    hc[n] = wb[q + n] * ea[n];
                }
                if (na == 5 && zmax == 4)
                    grad_block(5, 4, off, ga, geo, e, de, ha, hb, hc, aa, acc, b0, b1);
                else
                    grad_block(na, zmax, off, ga, geo, e, de, ha, hb, hc, aa, acc, b0, b1);
            }
        }
        /* d c_ab / d x_a = (u_b - c u_a) / r_a, summed over b with weights A */
        for (int a = 0; a < cnt; a++) {
            const double *ga = geo + 4 * (size_t)a, *aa = acc + 5 * (size_t)a;
            double inv = 1 / ga[0];
            double *gg = gj + 3 * (size_t)iscratch[a];
            for (int k = 0; k < 3; k++)
                gg[k] += aa[0] * ga[1 + k] + (aa[1 + k] - aa[4] * ga[1 + k]) * inv;
        }
    }
    gi[0] = gi[1] = gi[2] = 0;
    for (int s = 0; s < nn; s++)
        for (int k = 0; k < 3; k++)
            gi[k] -= gj[3 * s + k];
}

void nd_descriptor_atom_grad(const nd_descriptor_params *p, int nel, const double *x,
                             const int *species, int i, const int *nbr, int nn, const double *u,
                             double *gi, double *gj, double *dscratch, int *iscratch)
{
    atom_grad(p, nel, x, species, i, nbr, nn, u, NULL, NULL, 0, gi, gj, dscratch, iscratch);
}

void nd_descriptor_atom_grad_shared(const nd_descriptor_params *p, int nel, const double *x,
                                    const int *species, int i, const int *nbr, int nn,
                                    const double *U, const int *row, int D, double *gi,
                                    double *gj, double *dscratch, int *iscratch)
{
    atom_grad(p, nel, x, species, i, nbr, nn, U + (size_t)row[i] * D, U, row, D, gi, gj, dscratch,
              iscratch);
}

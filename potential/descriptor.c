/* Behler-Parrinello symmetry functions and their contracted derivatives.
 * See descriptor.h for the definitions and the feature layout. The angular
 * terms of our default sets go to the vectorised kernel of
 * angular_default.c; other sets take the general pair loops here.
 *
 * Speed: the per-pair loops over Gaussians and angular sets are written to
 * be vectorised (nd_exp, "omp simd"); -fno-trapping-math lets GCC turn the
 * comparisons inside them into selects. It changes no result: it only
 * declares that the program does not inspect the floating-point exception
 * flags. (sqrt stays out of the vectorised loops: with errno it is a call.) */
#pragma GCC optimize("no-trapping-math")
#include "potential/descriptor.h"
#include "potential/angular_default.h"

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

int nd_descriptor_equal(const nd_descriptor_params *a, const nd_descriptor_params *b)
{
    if (a->radial_cutoff != b->radial_cutoff || a->angular_cutoff != b->angular_cutoff ||
        a->nradial != b->nradial || a->nangular != b->nangular)
        return 0;
    for (int i = 0; i < a->nradial; i++)
        if (a->radial_eta[i] != b->radial_eta[i] || a->radial_shift[i] != b->radial_shift[i])
            return 0;
    for (int i = 0; i < a->nangular; i++)
        if (a->angular_eta[i] != b->angular_eta[i] || a->angular_zeta[i] != b->angular_zeta[i] ||
            a->angular_lambda[i] != b->angular_lambda[i])
            return 0;
    return 1;
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

static size_t radial_scratch(int nn);

size_t nd_descriptor_scratch_doubles(const nd_descriptor_params *p, int nel, int maxnn)
{
    size_t nn = (size_t)(maxnn > 0 ? maxnn : 1);
    size_t ang = nn * (size_t)(4 + 2 * p->nangular + 6) +
                 2 * (size_t)(nel * (nel + 1) / 2) * (size_t)p->nangular;
    size_t rad = radial_scratch(maxnn), dflt = nd_angular_default_scratch(nel, maxnn);
    ang = ang > rad ? ang : rad;
    return ang > dflt ? ang : dflt;
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
            double ex = nd_exp(-p->angular_eta[n] * r2);
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

/* The radial Gaussians g_m = exp(-eta_m (r - s_m)^2), m = 0 .. nr-1.
 *
 * When every eta is the same and the centres are evenly spaced (our
 * defaults), they come from three exponentials per pair by the exact
 * recurrence g_{m+1} = g_m rho_m, rho_{m+1} = rho_m kappa
 * (rho_m = exp(-eta d (2 (s_m - r) + d)), kappa = exp(-2 eta d^2)), started
 * at the centre c nearest r and run both ways: g_c = exp(-eta u^2) with
 * u = r - s_c, up = exp(-eta d (d - 2u)) = g_{c+1}/g_c and
 * down = exp(-eta d (d + 2u)) = g_{c-1}/g_c. Every exponent stays small
 * (|u| <= d/2 inside the grid), nothing overflows, only negligible values
 * underflow, and the result agrees with direct evaluation to a few ulps.
 * The three exponentials of all pairs of an atom are computed in one loop
 * the compiler vectorises (radial_setup); the recurrences are scalar.
 * Otherwise each g_m is evaluated directly (vectorised over m). */
typedef struct radial_grid {
    int uniform;
    double eta, s0, d, kappa;
} radial_grid;

/* Whether the radial set is uniform (one eta, evenly spaced centres to
 * 1e-12 relative), and its constants. */
static radial_grid radial_grid_of(const nd_descriptor_params *p)
{
    radial_grid g = {0, 0, 0, 1, 1};
    const int nr = p->nradial;
    if (nr < 3)
        return g;
    double d = p->radial_shift[1] - p->radial_shift[0];
    if (!(d > 0))
        return g;
    for (int m = 1; m < nr; m++) {
        if (p->radial_eta[m] != p->radial_eta[0])
            return g;
        double dm = p->radial_shift[m] - p->radial_shift[m - 1];
        if (fabs(dm - d) > 1e-12 * d)
            return g;
    }
    g.uniform = 1;
    g.eta = p->radial_eta[0];
    g.s0 = p->radial_shift[0];
    g.d = d;
    g.kappa = exp(-2 * g.eta * d * d);
    return g;
}

/* Per-pair radial quantities of one centre, struct-of-arrays (each nn long). */
typedef struct radial_pairs {
    int cnt;              /* pairs kept */
    int *idx;             /* their position in nbr */
    double *r, *ux, *uy, *uz; /* distance and unit vector (x_j - x_i) / r */
    double *fc, *dfc;     /* cutoff and its derivative */
    double *cq, *g0, *up, *dn; /* uniform grids: nearest centre, g_c, up, down */
} radial_pairs;

/* Doubles of scratch radial_setup needs for nn neighbours. */
static size_t radial_scratch(int nn) { return 11 * (size_t)(nn > 0 ? nn : 1); }

/* Gathers the neighbours of i within the radial cutoff (skipping those
 * with index below i when skip_lower) and computes their distances, unit
 * vectors, cutoffs and, for a uniform grid, the three exponentials above.
 * dscratch: radial_scratch(nn) doubles; idx: nn ints. The avx2 clone runs
 * the vectorised loops (no reductions) four at a time: same bits. */
__attribute__((target_clones("avx2", "default"))) static void
radial_setup(const nd_descriptor_params *p, const radial_grid *grid, const double *x, int i,
             const int *nbr, int nn, int skip_lower, double *dscratch, int *idx, radial_pairs *rp)
{
    const double rc = p->radial_cutoff, rc2 = rc * rc;
    const double *xi = x + 3 * (size_t)i;
    size_t n = (size_t)(nn > 0 ? nn : 1);
    rp->idx = idx;
    rp->r = dscratch;
    rp->ux = rp->r + n;
    rp->uy = rp->ux + n;
    rp->uz = rp->uy + n;
    rp->fc = rp->uz + n;
    rp->dfc = rp->fc + n;
    rp->cq = rp->dfc + n;
    rp->g0 = rp->cq + n;
    rp->up = rp->g0 + n;
    rp->dn = rp->up + n;
    double *r = rp->r, *ux = rp->ux, *uy = rp->uy, *uz = rp->uz;
    int cnt = 0;
    for (int s = 0; s < nn; s++) {
        int j = nbr[s];
        if (skip_lower && j < i) /* before the distance: half the pairs */
            continue;
        const double *xj = x + 3 * (size_t)j;
        double dx = xj[0] - xi[0], dy = xj[1] - xi[1], dz = xj[2] - xi[2];
        double r2 = dx * dx + dy * dy + dz * dz;
        if (r2 >= rc2)
            continue;
        idx[cnt] = s;
        r[cnt] = sqrt(r2);
        ux[cnt] = dx;
        uy[cnt] = dy;
        uz[cnt] = dz;
        cnt++;
    }
    rp->cnt = cnt;
    double *fc = rp->fc, *dfc = rp->dfc;
#pragma omp simd
    for (int q = 0; q < cnt; q++) {
        double rr = r[q], inv = 1 / rr;
        ux[q] *= inv;
        uy[q] *= inv;
        uz[q] *= inv;
        /* nd_descriptor_cutoff for r < rc */
        double t = rr / rc, v = 1 - t;
        fc[q] = v * v * v * (1 + 3 * t + 6 * t * t);
        dfc[q] = -30 * t * t * v * v / rc;
    }
    if (!grid->uniform)
        return;
    const double eta = grid->eta, s0 = grid->s0, d = grid->d, cmax = p->nradial - 1;
    double *cq = rp->cq, *g0 = rp->g0, *up = rp->up, *dn = rp->dn;
#pragma omp simd
    for (int q = 0; q < cnt; q++) {
        /* nearest centre: (r - s0) / d rounded to an integer (by adding and
         * subtracting 1.5 2^52), kept inside 0 .. nr-1 */
        double c = ((r[q] - s0) / d + 0x1.8p52) - 0x1.8p52;
        c = c > 0 ? c : 0;
        c = c < cmax ? c : cmax;
        double u = r[q] - (s0 + c * d);
        double au = -eta * d * (d - 2 * u), ad = -eta * d * (d + 2 * u);
        cq[q] = c;
        g0[q] = nd_exp(-eta * u * u);
        /* the ratio not used at the ends of the grid may be huge: capped */
        up[q] = nd_exp(au < 700 ? au : 700);
        dn[q] = nd_exp(ad < 700 ? ad : 700);
    }
}

/* The nr Gaussians of pair q of rp into g. */
static inline void radial_values(const nd_descriptor_params *p, const radial_grid *grid,
                                 const radial_pairs *rp, int q, double *g)
{
    const int nr = p->nradial;
    if (!grid->uniform) {
        const double *eta = p->radial_eta, *shift = p->radial_shift, r = rp->r[q];
#pragma omp simd
        for (int m = 0; m < nr; m++) {
            double dd = r - shift[m];
            g[m] = nd_exp(-eta[m] * dd * dd);
        }
        return;
    }
    const double kappa = grid->kappa;
    int c = (int)rp->cq[q];
    double gc = rp->g0[q];
    g[c] = gc;
    double gm = gc, rho = rp->up[q];
    for (int m = c + 1; m < nr; m++) {
        gm *= rho;
        rho *= kappa;
        g[m] = gm;
    }
    gm = gc;
    rho = rp->dn[q];
    for (int m = c - 1; m >= 0; m--) {
        gm *= rho;
        rho *= kappa;
        g[m] = gm;
    }
}

/* out[m] += scale g_m for the Gaussians of pair q: for a uniform grid
 * straight from the recurrence (scale folded into its start), without a
 * copy of the values. */
static inline void radial_add(const nd_descriptor_params *p, const radial_grid *grid,
                              const radial_pairs *rp, int q, double scale, double *out)
{
    const int nr = p->nradial;
    if (!grid->uniform) {
        double g[ND_DESC_MAX_RADIAL];
        radial_values(p, grid, rp, q, g);
        for (int m = 0; m < nr; m++)
            out[m] += g[m] * scale;
        return;
    }
    const double kappa = grid->kappa;
    int c = (int)rp->cq[q];
    double gc = rp->g0[q] * scale, gm = gc, rho = rp->up[q];
    out[c] += gc;
    for (int m = c + 1; m < nr; m++) {
        gm *= rho;
        rho *= kappa;
        out[m] += gm;
    }
    gm = gc;
    rho = rp->dn[q];
    for (int m = c - 1; m >= 0; m--) {
        gm *= rho;
        rho *= kappa;
        out[m] += gm;
    }
}

/* sum_m w_m d(g_m fc)/dr = sum_m w_m g_m (fc' - 2 eta_m (r - s_m) fc) for
 * pair q, with w_m = wa_m + wb_m when two (the weights of both centres of
 * a shared pair, added here instead of in a pass of their own), else wa_m;
 * for a uniform grid, with one eta, as fc' S0 - 2 eta fc S1 from the sums
 * S0 = sum w g and S1 = sum w g (r - s) along the recurrence. Inlined with
 * two a constant. */
static inline __attribute__((always_inline)) double
radial_dedr(const nd_descriptor_params *p, const radial_grid *grid, const radial_pairs *rp, int q,
            const double *wa, const double *wb, int two)
{
#define W(m) (two ? wa[m] + wb[m] : wa[m])
    const int nr = p->nradial;
    const double *shift = p->radial_shift, r = rp->r[q], fc = rp->fc[q], dfc = rp->dfc[q];
    if (!grid->uniform) {
        double g[ND_DESC_MAX_RADIAL], dedr = 0;
        radial_values(p, grid, rp, q, g);
        for (int m = 0; m < nr; m++)
            dedr += W(m) * g[m] * (dfc - 2 * p->radial_eta[m] * (r - shift[m]) * fc);
        return dedr;
    }
    const double kappa = grid->kappa;
    int c = (int)rp->cq[q];
    double gc = rp->g0[q], gm = gc, rho = rp->up[q], wc = W(c);
    double s0 = wc * gc, s1 = wc * gc * (r - shift[c]);
    for (int m = c + 1; m < nr; m++) {
        gm *= rho;
        rho *= kappa;
        double wm = W(m);
        s0 += wm * gm;
        s1 += wm * gm * (r - shift[m]);
    }
    gm = gc;
    rho = rp->dn[q];
    for (int m = c - 1; m >= 0; m--) {
        gm *= rho;
        rho *= kappa;
        double wm = W(m);
        s0 += wm * gm;
        s1 += wm * gm * (r - shift[m]);
    }
    return dfc * s0 - 2 * grid->eta * fc * s1;
#undef W
}

/* nd_descriptor_atom, keeping the angular set-up when kept is not NULL. */
static void atom_features(const nd_descriptor_params *p, int nel, const double *x,
                          const int *species, int i, const int *nbr, int nn, double *G,
                          double *dscratch, int *iscratch, nd_angular_kept *kept, double *rows)
{
    if (kept)
        kept->cnt = -1;
    const int nr = p->nradial, na = p->nangular;
    const int D = nd_descriptor_size(p, nel);
    memset(G, 0, sizeof(double) * (size_t)D);
    radial_grid grid = radial_grid_of(p);
    radial_pairs rp;
    radial_setup(p, &grid, x, i, nbr, nn, 0, dscratch, iscratch, &rp);
    for (int q = 0; q < rp.cnt; q++)
        radial_add(p, &grid, &rp, q, rp.fc[q], G + (size_t)species[nbr[rp.idx[q]]] * nr);
    if (na == 0)
        return;
    double *GA = G + (size_t)nel * nr;
    if (nd_angular_is_default(p)) {
        if (kept)
            nd_angular_default_features_keep(p, nel, x, species, i, nbr, nn, GA, dscratch,
                                             iscratch, kept, rows);
        else
            nd_angular_default_features(p, nel, x, species, i, nbr, nn, GA, dscratch, iscratch);
        return;
    }
    double *geo = dscratch, *e = geo + 4 * (size_t)nn, *de = e + (size_t)nn * na;
    double *tmp = de + (size_t)nn * na;
    int block[ND_DESC_MAX_ELEMENTS + 1];
    int cnt = angular_setup(p, nel, x, species, i, nbr, nn, geo, e, de, iscratch, block, tmp);
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
            fwd_block(na, zmax, off, ga, geo, e, b0, b1, S);
            double *g = GA + (size_t)nd_angular_pair_index(za, zb, nel) * na;
            for (int n = 0; n < na; n++)
                g[n] += norm[n] * ea[n] * S[n];
        }
    }
}

void nd_descriptor_atom(const nd_descriptor_params *p, int nel, const double *x, const int *species,
                        int i, const int *nbr, int nn, double *G, double *dscratch, int *iscratch)
{
    atom_features(p, nel, x, species, i, nbr, nn, G, dscratch, iscratch, NULL, NULL);
}

void nd_descriptor_atom_keep(const nd_descriptor_params *p, int nel, const double *x,
                             const int *species, int i, const int *nbr, int nn, double *G,
                             double *dscratch, int *iscratch, nd_angular_kept *kept, double *rows)
{
    atom_features(p, nel, x, species, i, nbr, nn, G, dscratch, iscratch, kept, rows);
}

/* Shared body of the contraction calls. With U == NULL, the radial
 * term of every pair uses u (the row of atom i). With U (rows of all atoms,
 * row[atom] their row, D features), the radial terms of the pair (i, j) for
 * both centres are done here when i < j, from the one set of Gaussians, and
 * skipped when i > j (atom j does them). */
static void atom_grad(const nd_descriptor_params *p, int nel, const double *x, const int *species,
                      int i, const int *nbr, int nn, const double *u, const double *U,
                      const int *row, int D, double *gi, double *gj, double *dscratch,
                      int *iscratch, const nd_angular_kept *kept, const double *rows)
{
    const int nr = p->nradial, na = p->nangular;
    if (nn > 0)
        memset(gj, 0, sizeof(double) * 3 * (size_t)nn);
    radial_grid grid = radial_grid_of(p);
    radial_pairs rp;
    radial_setup(p, &grid, x, i, nbr, nn, U != NULL, dscratch, iscratch, &rp);
    for (int q = 0; q < rp.cnt; q++) {
        int s = rp.idx[q], j = nbr[s];
        const double *ui = u + (size_t)species[j] * nr;
        /* the weights of the pair's Gaussians: for both centres when shared */
        double dedr = U ? radial_dedr(p, &grid, &rp, q, ui,
                                      U + (size_t)row[j] * D + (size_t)species[i] * nr, 1)
                        : radial_dedr(p, &grid, &rp, q, ui, NULL, 0);
        gj[3 * s + 0] = dedr * rp.ux[q];
        gj[3 * s + 1] = dedr * rp.uy[q];
        gj[3 * s + 2] = dedr * rp.uz[q];
    }
    if (na > 0 && nd_angular_is_default(p)) {
        nd_angular_default_grad_kept(p, nel, x, species, i, nbr, nn, u + (size_t)nel * nr, gj,
                                     dscratch, iscratch, kept, rows);
    } else if (na > 0) {
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
                size_t q = (size_t)nd_angular_pair_index(za, zb, nel) * na;
                /* factors of a, hoisted out of the loop over b */
                double ha[ND_DESC_MAX_ANGULAR], hb[ND_DESC_MAX_ANGULAR], hc[ND_DESC_MAX_ANGULAR];
                for (int n = 0; n < na; n++) {
                    ha[n] = wa[q + n] * ea[n];
                    hb[n] = wb[q + n] * dea[n];
                    hc[n] = wb[q + n] * ea[n];
                }
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
    atom_grad(p, nel, x, species, i, nbr, nn, u, NULL, NULL, 0, gi, gj, dscratch, iscratch, NULL,
              NULL);
}

void nd_descriptor_atom_grad_shared(const nd_descriptor_params *p, int nel, const double *x,
                                    const int *species, int i, const int *nbr, int nn,
                                    const double *U, const int *row, int D, double *gi,
                                    double *gj, double *dscratch, int *iscratch)
{
    atom_grad(p, nel, x, species, i, nbr, nn, U + (size_t)row[i] * D, U, row, D, gi, gj, dscratch,
              iscratch, NULL, NULL);
}

void nd_descriptor_atom_grad_kept(const nd_descriptor_params *p, int nel, const double *x,
                                  const int *species, int i, const int *nbr, int nn,
                                  const double *U, const int *row, int D, double *gi, double *gj,
                                  double *dscratch, int *iscratch, const nd_angular_kept *kept,
                                  const double *rows)
{
    atom_grad(p, nel, x, species, i, nbr, nn, U + (size_t)row[i] * D, U, row, D, gi, gj, dscratch,
              iscratch, kept, rows);
}

/* Forward-mode tangent v_i = sum_k J_ik r_k (see descriptor.h). Since G_i
 * depends only on the vectors x_j - x_i, v_i = sum_j (dG_i/dx_j) (r_j - r_i):
 * one pass over the pairs and triplets of i, with the radial Gaussians and
 * the angular set-up of nd_descriptor_atom. */
void nd_descriptor_atom_tangent(const nd_descriptor_params *p, int nel, const double *x,
                                const int *species, int i, const int *nbr, int nn, const double *rt,
                                double *v, double *dscratch, int *iscratch)
{
    const int nr = p->nradial, na = p->nangular;
    const int D = nd_descriptor_size(p, nel);
    memset(v, 0, sizeof(double) * (size_t)D);
    const double *ri = rt + 3 * (size_t)i, *shift = p->radial_shift;
    radial_grid grid = radial_grid_of(p);
    radial_pairs rp;
    radial_setup(p, &grid, x, i, nbr, nn, 0, dscratch, iscratch, &rp);
    for (int q = 0; q < rp.cnt; q++) {
        int j = nbr[rp.idx[q]];
        const double *rj = rt + 3 * (size_t)j;
        /* d r_ij along the tangent */
        double drr = rp.ux[q] * (rj[0] - ri[0]) + rp.uy[q] * (rj[1] - ri[1]) +
                     rp.uz[q] * (rj[2] - ri[2]);
        double gm[ND_DESC_MAX_RADIAL], r = rp.r[q], fc = rp.fc[q], dfc = rp.dfc[q];
        radial_values(p, &grid, &rp, q, gm);
        double *vv = v + (size_t)species[j] * nr;
        for (int m = 0; m < nr; m++)
            vv[m] += gm[m] * (dfc - 2 * p->radial_eta[m] * (r - shift[m]) * fc) * drr;
    }
    if (na == 0)
        return;
    /* scratch: the angular set-up (geo, e, de, tmp), then per angular
     * neighbour the relative displacement / r (3) and d r */
    double *geo = dscratch, *e = geo + 4 * (size_t)nn, *de = e + (size_t)nn * na;
    double *tmp = de + (size_t)nn * na, *rel = tmp + nn;
    int block[ND_DESC_MAX_ELEMENTS + 1];
    int cnt = angular_setup(p, nel, x, species, i, nbr, nn, geo, e, de, iscratch, block, tmp);
    for (int q = 0; q < cnt; q++) {
        const double *rj = rt + 3 * (size_t)nbr[iscratch[q]], *gq = geo + 4 * (size_t)q;
        double *rq = rel + 4 * (size_t)q, inv = 1 / gq[0];
        double w0 = rj[0] - ri[0], w1 = rj[1] - ri[1], w2 = rj[2] - ri[2];
        rq[0] = w0 * inv;
        rq[1] = w1 * inv;
        rq[2] = w2 * inv;
        rq[3] = gq[1] * w0 + gq[2] * w1 + gq[3] * w2;
    }
    double *VA = v + (size_t)nel * nr;
    double norm[ND_DESC_MAX_ANGULAR], zl[ND_DESC_MAX_ANGULAR];
    int zmax = 0, off[ND_DESC_MAX_ANGULAR], dflt = nd_angular_is_default(p);
    for (int n = 0; n < na; n++) {
        norm[n] = ldexp(1.0, 1 - p->angular_zeta[n]);
        zl[n] = (double)(p->angular_zeta[n] * p->angular_lambda[n]);
        zmax = p->angular_zeta[n] > zmax ? p->angular_zeta[n] : zmax;
        off[n] = (p->angular_lambda[n] > 0 ? ZS : 0) + p->angular_zeta[n];
    }
    int za = 0;
    for (int a = 0; a < cnt; a++) {
        while (a >= block[za + 1])
            za++;
        const double *ga = geo + 4 * (size_t)a, *ea = e + (size_t)a * na,
                     *dea = de + (size_t)a * na, *ra = rel + 4 * (size_t)a;
        int zb = za;
        for (int b = a + 1; b < cnt; b++) {
            while (b >= block[zb + 1])
                zb++;
            const double *gb = geo + 4 * (size_t)b, *eb = e + (size_t)b * na,
                         *deb = de + (size_t)b * na, *rb = rel + 4 * (size_t)b;
            double c = ga[1] * gb[1] + ga[2] * gb[2] + ga[3] * gb[3];
            /* d cos = (u_b - c u_a) . dr_a / r_a + (u_a - c u_b) . dr_b / r_b */
            double dc = 0;
            for (int k = 0; k < 3; k++)
                dc += (gb[1 + k] - c * ga[1 + k]) * ra[k] + (ga[1 + k] - c * gb[1 + k]) * rb[k];
            double *vv = VA + (size_t)nd_angular_pair_index(za, zb, nel) * na;
            if (dflt) {
                /* (1 + lambda c)^(zeta - 1) and ^zeta of the default sets */
                double p1 = 1 + c, m1 = 1 - c, p2 = p1 * p1, m2 = m1 * m1;
                double pw1[5] = {1, 1, p2 * p1, m2 * m1, p1};
                double pw[5] = {p1, m1, p2 * p2, m2 * m2, p2};
                for (int n = 0; n < 5; n++)
                    vv[n] += norm[n] * (zl[n] * pw1[n] * dc * ea[n] * eb[n] +
                                        pw[n] * (dea[n] * eb[n] * ra[3] + ea[n] * deb[n] * rb[3]));
                continue;
            }
            double t[2 * ZS];
            cos_powers(c, zmax, t);
            for (int n = 0; n < na; n++) {
                double pw1 = t[off[n] - 1], pw = t[off[n]];
                vv[n] += norm[n] * (zl[n] * pw1 * dc * ea[n] * eb[n] +
                                    pw * (dea[n] * eb[n] * ra[3] + ea[n] * deb[n] * rb[3]));
            }
        }
    }
}

size_t nd_descriptor_tangent_scratch_doubles(const nd_descriptor_params *p, int maxnn)
{
    size_t nn = (size_t)(maxnn > 0 ? maxnn : 1);
    size_t ang = nn * (size_t)(9 + 2 * p->nangular), rad = radial_scratch(maxnn);
    return ang > rad ? ang : rad;
}

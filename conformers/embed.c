/* Distance-geometry embedding (see embed.h for the outline).
 *
 * The method is distance geometry with metric matrix embedding (G. M.
 * Crippen and T. F. Havel, "Distance Geometry and Molecular Conformation",
 * Research Studies Press, 1988): bounds, triangle smoothing, random
 * distances, the metric matrix G_ij = (D_i0^2 + D_j0^2 - d_ij^2) / 2 about
 * the centroid, coordinates from its three largest eigenpairs, then error
 * function refinement. The parameters below are ours and say where each
 * number comes from. */
#include "conformers/embed.h"

#include "core/elements.h"
#include "core/energy.h"
#include "core/rng.h"
#include "optimize/minimize.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define DEG (3.14159265358979323846 / 180.0)
#define BIG_DISTANCE 1000.0

void nd_embed_options_default(nd_embed_options *o)
{
    o->max_attempts = 30;
    o->max_steps = 2000;
    o->bond_tol = 0.05;
    o->contact_ratio = 0.6;
    o->part_gap = 3.0;
}

/* Bondi van der Waals radii (A. Bondi, J. Phys. Chem. 68, 441, 1964; values
 * from memory), boron from Mantina et al. (J. Phys. Chem. A 113, 5806,
 * 2009; from memory). Other elements 2.0 (common practice, no source). */
double nd_embed_vdw_radius(int z)
{
    switch (z) {
    case 1: return 1.20;
    case 5: return 1.92;
    case 6: return 1.70;
    case 7: return 1.55;
    case 8: return 1.52;
    case 9: return 1.47;
    case 14: return 2.10;
    case 15: return 1.80;
    case 16: return 1.80;
    case 17: return 1.75;
    case 34: return 1.90;
    case 35: return 1.85;
    case 53: return 1.98;
    default: return 2.0;
    }
}

/* --------------------------------------------------------------- targets */

/* 1 if bond b (single) joins an sp2 C that has a double bond to O, N or S
 * with an N or O lone-pair donor: amides, esters, carbamates, ureas. */
static int conjugated_single(const nd_molecule *m, const nd_topology *t, int b)
{
    const nd_bond *bd = &m->bonds[b];
    int ends[2] = {bd->a, bd->b};
    for (int e = 0; e < 2; e++) {
        int c = ends[e], x = ends[1 - e];
        if (m->z[c] != 6 || (m->z[x] != 7 && m->z[x] != 8))
            continue;
        for (int k = t->start[c]; k < t->start[c + 1]; k++) {
            int y = t->nbr[k];
            if (y != x && m->bonds[t->nbr_bond[k]].order == ND_BOND_DOUBLE &&
                (m->z[y] == 8 || m->z[y] == 7 || m->z[y] == 16))
                return 1;
        }
    }
    return 0;
}

/* Bond length model. D(n) = r_a + r_b - c log10(n) (Pauling's bond-order
 * relation, L. Pauling, J. Am. Chem. Soc. 69, 542, 1947, with c = 0.71;
 * from memory) on the Cordero single-bond radii of elements.h; single bonds
 * between heavy atoms shortened 0.02 A per sp2 end and 0.05 per sp end
 * (the Cordero sp2/sp carbon radii are 0.03/0.07 below sp3; scaled down,
 * common practice, no source); S=O and P=O shortened 0.06 and 0.04 more
 * (sulfone 1.44, phosphoryl 1.48 A in Allen et al., J. Chem. Soc. Perkin
 * Trans. 2, 1987, S1; from memory). Bonds of flat rings and amide/ester
 * C-N/C-O bonds take order 1.5. */
double nd_embed_bond_length(const nd_molecule *m, const nd_topology *t, int b)
{
    const nd_bond *bd = &m->bonds[b];
    int a = bd->a, c = bd->b, za = m->z[a], zc = m->z[c];
    double ra = nd_element_covalent_radius(za), rc = nd_element_covalent_radius(zc);
    if (ra <= 0)
        ra = 1.5;
    if (rc <= 0)
        rc = 1.5;
    double order = bd->order == ND_BOND_AROMATIC ? 1.5 : (double)bd->order;
    if (t->bond_flat[b] >= 0 || (bd->order == ND_BOND_SINGLE && conjugated_single(m, t, b)))
        order = 1.5;
    double d = ra + rc - 0.71 * log10(order);
    if (order == 1.0 && za != 1 && zc != 1) {
        int ends[2] = {a, c};
        for (int e = 0; e < 2; e++) {
            int h = t->hyb[ends[e]];
            if (h == ND_HYB_SP2)
                d -= 0.02;
            else if (h == ND_HYB_SP)
                d -= 0.05;
        }
    }
    if (bd->order == ND_BOND_DOUBLE && (za == 8 || zc == 8)) {
        int other = za == 8 ? zc : za;
        if (other == 16)
            d -= 0.06;
        else if (other == 15)
            d -= 0.04;
    }
    return d;
}

/* Ideal angle (radians) at atom j between neighbours i and k. Rings of 3-5
 * atoms and flat rings take the angle of a regular polygon (sp3 rings a
 * little less: 88 degrees in 4-rings and 104 in 5-rings, near cyclobutane
 * and cyclopentane, from memory); the exocyclic angles of a planar centre
 * share what the ring angles leave of 360 degrees, those of a tetrahedral
 * ring atom open up a little (common practice, no source); otherwise the
 * angle of the hybridisation, 100 degrees at two-coordinate S, Se, P
 * (C-S-C of dimethyl sulfide is about 99 degrees, from memory). */
static double ideal_angle(const nd_molecule *m, const nd_topology *t, int i, int j, int k)
{
    int hyb = t->hyb[j], deg = nd_topology_degree(t, j);
    int ring = nd_topology_angle_ring(t, i, j, k);
    if (ring) {
        int flat = t->atom_flat[j];
        if (ring == 3)
            return 60.0 * DEG;
        if (ring == 4)
            return (hyb == ND_HYB_SP3 ? 88.0 : 90.0) * DEG;
        if (ring == 5)
            return (hyb == ND_HYB_SP3 ? 104.0 : 108.0) * DEG;
        if (ring <= 7 && (flat || hyb == ND_HYB_SP2))
            return (180.0 - 360.0 / ring) * DEG;
        /* larger rings fall through to the hybridisation */
    }
    if (hyb == ND_HYB_SP)
        return 180.0 * DEG;
    if (hyb == ND_HYB_SP2 && deg == 3) {
        int nb[3], c = 0;
        for (int q = t->start[j]; q < t->start[j + 1]; q++)
            nb[c++] = t->nbr[q];
        double used = 0.0;
        int free_pairs = 0;
        for (int p = 0; p < 3; p++)
            for (int q = p + 1; q < 3; q++) {
                int r = nd_topology_angle_ring(t, nb[p], j, nb[q]);
                if (r >= 3 && r <= 7)
                    used += r == 3 ? 60.0 : r == 4 ? 90.0 : 180.0 - 360.0 / r;
                else
                    free_pairs++;
            }
        if (free_pairs > 0 && used > 0)
            return (360.0 - used) / free_pairs * DEG;
        return 120.0 * DEG;
    }
    if (hyb == ND_HYB_SP2)
        return 120.0 * DEG;
    if (deg >= 5)
        return 90.0 * DEG;
    /* tetrahedral spiro centre: i and k each in a different small ring at
     * j; with the two ring planes perpendicular and the ring bisectors
     * opposite, cos(i-j-k) = -cos(a1/2) cos(a2/2) (geometry) */
    double ai = 0.0, ak = 0.0;
    for (int q = t->start[j]; q < t->start[j + 1]; q++) {
        int o = t->nbr[q];
        if (o == i || o == k)
            continue;
        int ri = nd_topology_angle_ring(t, i, j, o), rk = nd_topology_angle_ring(t, k, j, o);
        if (ri >= 3 && ri <= 5 && ai == 0.0)
            ai = ri == 3 ? 60.0 : ri == 4 ? 88.0 : 104.0;
        else if (rk >= 3 && rk <= 5 && ak == 0.0)
            ak = rk == 3 ? 60.0 : rk == 4 ? 88.0 : 104.0;
    }
    if (ai > 0 && ak > 0 && deg == 4)
        return acos(-cos(0.5 * ai * DEG) * cos(0.5 * ak * DEG));
    /* tetrahedral: open up next to a small ring */
    int smallest = 0;
    for (int q = t->start[j]; q < t->start[j + 1]; q++)
        for (int r = q + 1; r < t->start[j + 1]; r++) {
            int s = nd_topology_angle_ring(t, t->nbr[q], j, t->nbr[r]);
            if (s && (!smallest || s < smallest))
                smallest = s;
        }
    if (smallest == 3)
        return 117.0 * DEG;
    if (smallest == 4)
        return 114.0 * DEG;
    if (smallest == 5)
        return 111.0 * DEG;
    if (deg == 2 && (m->z[j] == 16 || m->z[j] == 34 || m->z[j] == 15))
        return 100.0 * DEG;
    return 109.47 * DEG;
}

/* --------------------------------------------------------------- the problem */

typedef struct {
    int i, j;
    double lo, hi, w;
} dterm;

typedef struct {
    int c, a, b, d;     /* volume (a-c).((b-c)x(d-c)) */
    double lo, hi, w;
} vterm;

typedef struct {
    int n;
    dterm *d;
    int nd, cap_d;
    vterm *v;
    int nv, cap_v;
    int dg_style; /* 1: bounds error of distance geometry; 0: plain flat-bottom harmonic */
    int dim;      /* coordinates per atom: 3, or 4 while refining in four dimensions */
    double w4;    /* weight of the sum of squared fourth coordinates (squeezes 4D into 3D) */
} problem;

/* Appends a distance term; ND_ENOMEM on failure. */
static int add_d(problem *p, int i, int j, double lo, double hi, double w)
{
    if (p->nd == p->cap_d) {
        int cap = p->cap_d ? 2 * p->cap_d : 256;
        dterm *nd = realloc(p->d, (size_t)cap * sizeof *nd);
        if (!nd)
            return ND_ENOMEM;
        p->d = nd;
        p->cap_d = cap;
    }
    p->d[p->nd++] = (dterm){i, j, lo, hi, w};
    return ND_OK;
}

/* Appends a signed-volume term; ND_ENOMEM on failure. */
static int add_v(problem *p, int c, int a, int b, int d, double lo, double hi, double w)
{
    if (p->nv == p->cap_v) {
        int cap = p->cap_v ? 2 * p->cap_v : 64;
        vterm *nv = realloc(p->v, (size_t)cap * sizeof *nv);
        if (!nv)
            return ND_ENOMEM;
        p->v = nv;
        p->cap_v = cap;
    }
    p->v[p->nv++] = (vterm){c, a, b, d, lo, hi, w};
    return ND_OK;
}

/* Frees the term lists of p. */
static void problem_free(problem *p)
{
    free(p->d);
    free(p->v);
    memset(p, 0, sizeof *p);
}

/* Signed volume (a-c).((b-c)x(d-c)) from the first three of dim
 * coordinates per atom, with its gradient for a, b, d (c's is minus their
 * sum) when ga is not NULL. */
static double volume_dim(const double *x, int dim, int c, int a, int b, int d, double ga[3],
                         double gb[3], double gd[3])
{
    double u[3], v[3], w[3];
    for (int k = 0; k < 3; k++) {
        u[k] = x[dim * a + k] - x[dim * c + k];
        v[k] = x[dim * b + k] - x[dim * c + k];
        w[k] = x[dim * d + k] - x[dim * c + k];
    }
    double vxw[3] = {v[1] * w[2] - v[2] * w[1], v[2] * w[0] - v[0] * w[2], v[0] * w[1] - v[1] * w[0]};
    if (ga) {
        double wxu[3] = {w[1] * u[2] - w[2] * u[1], w[2] * u[0] - w[0] * u[2],
                         w[0] * u[1] - w[1] * u[0]};
        double uxv[3] = {u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2],
                         u[0] * v[1] - u[1] * v[0]};
        for (int k = 0; k < 3; k++) {
            ga[k] = vxw[k];
            gb[k] = wxu[k];
            gd[k] = uxv[k];
        }
    }
    return u[0] * vxw[0] + u[1] * vxw[1] + u[2] * vxw[2];
}

/* volume_dim for packed 3D coordinates. */
static double volume(const double *x, int c, int a, int b, int d, double ga[3], double gb[3],
                     double gd[3])
{
    return volume_dim(x, 3, c, a, b, d, ga, gb, gd);
}

/* The error function as an nd_energy: distance terms (the distance
 * geometry bounds error, or flat-bottom harmonic in the cleanup) and
 * flat-bottom harmonic volume terms. Exact gradient. */
static int problem_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const problem *p = ctx;
    int dim = p->dim;
    double e = 0.0;
    if (g)
        memset(g, 0, (size_t)(3 * n) * sizeof *g);
    for (int t = 0; t < p->nd; t++) {
        const dterm *d = &p->d[t];
        double r[4], d2 = 0.0;
        for (int k = 0; k < dim; k++) {
            r[k] = x[dim * d->i + k] - x[dim * d->j + k];
            d2 += r[k] * r[k];
        }
        double f = 0.0; /* dE/d(d2) */
        if (p->dg_style) {
            if (d2 > d->hi * d->hi) {
                double u2 = d->hi * d->hi, s = d2 / u2 - 1.0;
                e += d->w * s * s;
                f = d->w * 2.0 * s / u2;
            } else if (d2 < d->lo * d->lo) {
                double l2 = d->lo * d->lo, q = l2 + d2, s = 2.0 * l2 / q - 1.0;
                e += d->w * s * s;
                f = d->w * 2.0 * s * (-2.0 * l2 / (q * q));
            }
        } else {
            double dist = sqrt(d2);
            double dev = dist > d->hi ? dist - d->hi : dist < d->lo ? dist - d->lo : 0.0;
            if (dev != 0.0) {
                e += d->w * dev * dev;
                f = dist > 1e-12 ? d->w * 2.0 * dev / (2.0 * dist) : 0.0;
            }
        }
        if (g && f != 0.0)
            for (int k = 0; k < dim; k++) {
                g[dim * d->i + k] += f * 2.0 * r[k];
                g[dim * d->j + k] -= f * 2.0 * r[k];
            }
    }
    for (int t = 0; t < p->nv; t++) {
        const vterm *v = &p->v[t];
        double ga[3], gb[3], gd[3];
        double vol = volume_dim(x, dim, v->c, v->a, v->b, v->d, ga, gb, gd);
        double dev = vol > v->hi ? vol - v->hi : vol < v->lo ? vol - v->lo : 0.0;
        if (dev == 0.0)
            continue;
        e += v->w * dev * dev;
        if (g) {
            double f = 2.0 * v->w * dev;
            for (int k = 0; k < 3; k++) {
                g[dim * v->a + k] += f * ga[k];
                g[dim * v->b + k] += f * gb[k];
                g[dim * v->d + k] += f * gd[k];
                g[dim * v->c + k] -= f * (ga[k] + gb[k] + gd[k]);
            }
        }
    }
    if (dim == 4 && p->w4 > 0)
        for (int i = 0; i < p->n; i++) {
            double w = x[4 * i + 3];
            e += p->w4 * w * w;
            if (g)
                g[4 * i + 3] += 2.0 * p->w4 * w;
        }
    if (!isfinite(e))
        return ND_ECOMPUTE;
    *energy = e;
    return ND_OK;
}

/* --------------------------------------------------------------- geometry model */

typedef struct {
    const nd_molecule *m;
    nd_topology t;
    int n;
    double *blen;     /* per bond target */
    unsigned char *topo; /* n*n: 1, 2, 3 for 1-2, 1-3, 1-4 pairs, 0 otherwise */
    double *lo, *hi;  /* n*n bounds (symmetric) */
    double *t13;      /* n*n: 1-3 target distance (0 when not 1-3) */
    double *t14lo, *t14hi; /* n*n: 1-4 range used in the cleanup (0 when not 1-4) */
} model;

/* Frees what model_build allocated (also after a failed build). */
static void model_free(model *md)
{
    nd_topology_free(&md->t);
    free(md->blen);
    free(md->topo);
    free(md->lo);
    free(md->hi);
    free(md->t13);
    free(md->t14lo);
    free(md->t14hi);
}

/* Third side of a triangle with sides a, b and angle th between them. */
static double law_cos(double a, double b, double th)
{
    double d2 = a * a + b * b - 2.0 * a * b * cos(th);
    return sqrt(d2 > 0 ? d2 : 0);
}

/* Distance i..l across bond j-k for torsion phi (radians), given lengths
 * and angles at j and k. */
static double dist14(double lij, double ljk, double lkl, double th1, double th2, double phi)
{
    double ix = lij * cos(th1), iy = lij * sin(th1);
    double lx = ljk - lkl * cos(th2), ly = lkl * sin(th2) * cos(phi), lz = lkl * sin(th2) * sin(phi);
    double dx = ix - lx, dy = iy - ly, dz = lz;
    return sqrt(dx * dx + dy * dy + dz * dz);
}

/* For a torsion i-j-k-l: 1 cis, 2 trans when fixed by a configured double
 * bond or a small or flat ring containing j-k; 0 when free. */
static int fixed_torsion(const model *md, int b, int i, int j, int k, int l)
{
    const nd_molecule *m = md->m;
    const nd_topology *t = &md->t;
    const nd_bond *bd = &m->bonds[b];
    int ring = -1;
    if (t->bond_flat[b] >= 0)
        ring = t->bond_flat[b];
    else if (bd->order == ND_BOND_DOUBLE && t->bond_in_ring[b]) {
        int best = 0;
        for (int r = 0; r < t->nrings; r++) {
            int len = t->ring_start[r + 1] - t->ring_start[r];
            if (len <= 7 && nd_topology_ring_has(t, r, j) && nd_topology_ring_has(t, r, k) &&
                (!best || len < best)) {
                /* the ring must contain the bond itself */
                int s = t->ring_start[r], has = 0;
                for (int q = 0; q < len; q++) {
                    int x = t->ring_atoms[s + q], y = t->ring_atoms[s + (q + 1) % len];
                    if ((x == j && y == k) || (x == k && y == j))
                        has = 1;
                }
                if (has) {
                    best = len;
                    ring = r;
                }
            }
        }
    }
    if (ring >= 0) {
        int in_i = nd_topology_ring_has(t, ring, i), in_l = nd_topology_ring_has(t, ring, l);
        return in_i == in_l ? 1 : 2;
    }
    if (bd->order == ND_BOND_DOUBLE && bd->config != ND_DB_NONE) {
        int lj = -1, lk = -1;
        for (int q = t->start[j]; q < t->start[j + 1] && lj < 0; q++)
            if (t->nbr[q] != k)
                lj = t->nbr[q];
        for (int q = t->start[k]; q < t->start[k + 1] && lk < 0; q++)
            if (t->nbr[q] != j)
                lk = t->nbr[q];
        int cis = bd->config == ND_DB_CIS;
        if (i != lj)
            cis = !cis;
        if (l != lk)
            cis = !cis;
        return cis ? 1 : 2;
    }
    return 0;
}

/* A malloc'd n x n array set to fill, or NULL. */
static double *alloc_nn(int n, double fill)
{
    size_t nn = (size_t)n * (size_t)n;
    double *a = malloc(nn * sizeof *a);
    if (a)
        for (size_t q = 0; q < nn; q++)
            a[q] = fill;
    return a;
}

/* Sets bounds and targets for a connected molecule. */
static int model_build(model *md, const nd_molecule *m, nd_error *err)
{
    memset(md, 0, sizeof *md);
    md->m = m;
    int n = m->natoms, rc;
    md->n = n;
    if ((rc = nd_topology_build(m, &md->t, err)) != ND_OK)
        return rc;
    const nd_topology *t = &md->t;
    size_t nn = (size_t)n * (size_t)n;
    md->blen = malloc(((size_t)m->nbonds + 1) * sizeof *md->blen);
    md->topo = calloc(nn, 1);
    md->lo = alloc_nn(n, 0.0);
    md->hi = alloc_nn(n, BIG_DISTANCE);
    md->t13 = alloc_nn(n, 0.0);
    md->t14lo = alloc_nn(n, 0.0);
    md->t14hi = alloc_nn(n, 0.0);
    if (!md->blen || !md->topo || !md->lo || !md->hi || !md->t13 || !md->t14lo || !md->t14hi)
        return nd_fail(err, ND_ENOMEM, "out of memory embedding %d atoms", n);
    double *lo = md->lo, *hi = md->hi;
#define AT(a, i, j) a[(size_t)(i) * (size_t)n + (size_t)(j)]
    /* 1-2 */
    for (int b = 0; b < m->nbonds; b++) {
        int i = m->bonds[b].a, j = m->bonds[b].b;
        double L = md->blen[b] = nd_embed_bond_length(m, t, b);
        AT(md->topo, i, j) = AT(md->topo, j, i) = 1;
        AT(lo, i, j) = AT(lo, j, i) = L - 0.01;
        AT(hi, i, j) = AT(hi, j, i) = L + 0.01;
    }
    /* 1-3 */
    for (int j = 0; j < n; j++)
        for (int p = t->start[j]; p < t->start[j + 1]; p++)
            for (int q = p + 1; q < t->start[j + 1]; q++) {
                int i = t->nbr[p], k = t->nbr[q];
                if (AT(md->topo, i, k) == 1)
                    continue;
                double th = ideal_angle(m, t, i, j, k);
                double a = md->blen[t->nbr_bond[p]], c = md->blen[t->nbr_bond[q]];
                double tol = (t->hyb[j] == ND_HYB_SP3 ? 5.0 : 3.0) * DEG;
                double d0 = law_cos(a, c, th);
                double dl = law_cos(a, c, th - tol), dh = law_cos(a, c, th + tol > M_PI ? M_PI : th + tol);
                if (nd_topology_degree(t, j) >= 5) {
                    /* five or six neighbours (PCl5, SF6): any angle from 89 to 180
                     * degrees; the shape comes from all pairs together. d0 < 0
                     * tells the cleanup to keep the range */
                    dl = law_cos(a, c, 89.0 * DEG);
                    dh = a + c;
                    d0 = -1.0;
                }
                if (AT(md->topo, i, k) == 2) { /* second path (4-rings): widen to cover both */
                    if (dl < AT(lo, i, k))
                        AT(lo, i, k) = AT(lo, k, i) = dl;
                    if (dh > AT(hi, i, k))
                        AT(hi, i, k) = AT(hi, k, i) = dh;
                    if (d0 >= 0 && AT(md->t13, i, k) >= 0)
                        AT(md->t13, i, k) = AT(md->t13, k, i) = 0.5 * (AT(md->t13, i, k) + d0);
                    else
                        AT(md->t13, i, k) = AT(md->t13, k, i) = -1.0;
                    continue;
                }
                AT(md->topo, i, k) = AT(md->topo, k, i) = 2;
                AT(lo, i, k) = AT(lo, k, i) = dl;
                AT(hi, i, k) = AT(hi, k, i) = dh;
                AT(md->t13, i, k) = AT(md->t13, k, i) = d0;
            }
    /* 1-4 */
    for (int b = 0; b < m->nbonds; b++) {
        int j = m->bonds[b].a, k = m->bonds[b].b;
        for (int p = t->start[j]; p < t->start[j + 1]; p++) {
            int i = t->nbr[p];
            if (i == k)
                continue;
            for (int q = t->start[k]; q < t->start[k + 1]; q++) {
                int l = t->nbr[q];
                if (l == j || l == i || AT(md->topo, i, l) == 1 || AT(md->topo, i, l) == 2)
                    continue;
                double th1 = ideal_angle(m, t, i, j, k), th2 = ideal_angle(m, t, j, k, l);
                double lij = md->blen[t->nbr_bond[p]], lkl = md->blen[t->nbr_bond[q]];
                double ljk = md->blen[b];
                double dc = dist14(lij, ljk, lkl, th1, th2, 0.0);
                double dt = dist14(lij, ljk, lkl, th1, th2, M_PI);
                int fx = fixed_torsion(md, b, i, j, k, l);
                double l4, h4;
                if (fx == 1) {
                    l4 = dc - 0.08;
                    h4 = dc + 0.08;
                } else if (fx == 2) {
                    l4 = dt - 0.08;
                    h4 = dt + 0.08;
                } else {
                    l4 = dc;
                    h4 = dt;
                    if (l4 > h4) {
                        double s = l4;
                        l4 = h4;
                        h4 = s;
                    }
                }
                if (AT(md->topo, i, l) == 3) { /* a second path: keep the union */
                    if (l4 < AT(lo, i, l))
                        AT(lo, i, l) = AT(lo, l, i) = l4;
                    if (h4 > AT(hi, i, l))
                        AT(hi, i, l) = AT(hi, l, i) = h4;
                    AT(md->t14lo, i, l) = AT(md->t14lo, l, i) = AT(lo, i, l);
                    AT(md->t14hi, i, l) = AT(md->t14hi, l, i) = AT(hi, i, l);
                    continue;
                }
                AT(md->topo, i, l) = AT(md->topo, l, i) = 3;
                AT(lo, i, l) = AT(lo, l, i) = l4;
                AT(hi, i, l) = AT(hi, l, i) = h4;
                AT(md->t14lo, i, l) = AT(md->t14lo, l, i) = l4;
                AT(md->t14hi, i, l) = AT(md->t14hi, l, i) = fx ? h4 : BIG_DISTANCE;
            }
        }
    }
    /* van der Waals lower bounds beyond: 0.75 of the Bondi sum (common
     * practice, no source; keeps 1,3-diaxial H...H at 2.5 A feasible) */
    for (int i = 0; i < n; i++) {
        AT(lo, i, i) = AT(hi, i, i) = 0.0;
        for (int j = i + 1; j < n; j++)
            if (!AT(md->topo, i, j)) {
                double v = 0.75 * (nd_embed_vdw_radius(m->z[i]) + nd_embed_vdw_radius(m->z[j]));
                AT(lo, i, j) = AT(lo, j, i) = v;
            }
    }
#undef AT
    return ND_OK;
}

/* Triangle-inequality smoothing of the bounds (Floyd-Warshall form, Crippen
 * and Havel 1988, ch. 5): u_ij <= u_ik + u_kj and l_ij >= l_ik - u_kj.
 * Pairs left with l > u get l = u (the lower bound gives way). Returns the
 * number of such pairs. */
static int smooth_bounds(int n, double *lo, double *hi)
{
    for (int k = 0; k < n; k++) {
        const double *hk = hi + (size_t)k * (size_t)n, *lk = lo + (size_t)k * (size_t)n;
        for (int i = 0; i < n; i++) {
            if (i == k)
                continue;
            double uik = hi[(size_t)i * (size_t)n + (size_t)k];
            double lik = lo[(size_t)i * (size_t)n + (size_t)k];
            double *hirow = hi + (size_t)i * (size_t)n, *lorow = lo + (size_t)i * (size_t)n;
            for (int j = 0; j < n; j++) {
                if (j == i || j == k)
                    continue;
                double u = uik + hk[j];
                if (u < hirow[j])
                    hirow[j] = u;
                double l1 = lik - hk[j], l2 = lk[j] - uik;
                double l = l1 > l2 ? l1 : l2;
                if (l > lorow[j])
                    lorow[j] = l;
            }
        }
    }
    int bad = 0;
    for (int i = 0; i < n; i++)
        for (int j = 0; j < n; j++) {
            size_t q = (size_t)i * (size_t)n + (size_t)j;
            if (lo[q] > hi[q]) {
                lo[q] = hi[q];
                bad++;
            }
        }
    return bad;
}

/* Eigenvalues (ascending, in w) and eigenvectors (columns of V, row-major
 * k x k) of the symmetric k x k matrix A (destroyed), k <= 8, by the cyclic
 * Jacobi method (Golub and Van Loan, Matrix Computations, 4th ed., section
 * 8.5). Our own loops, so the bits do not depend on the BLAS library's
 * thread count, which LAPACK's routines do (measured: LAPACKE_dsyev on an
 * 8 x 8 matrix changed the last bits between OPENBLAS_NUM_THREADS=1 and 2). */
static void jacobi_eigen(int k, double *A, double *w, double *V)
{
    for (int i = 0; i < k; i++)
        for (int j = 0; j < k; j++)
            V[i * k + j] = i == j ? 1.0 : 0.0;
    for (int sweep = 0; sweep < 100; sweep++) {
        double off = 0, diag = 0;
        for (int i = 0; i < k; i++)
            for (int j = 0; j < k; j++)
                if (i != j)
                    off += A[i * k + j] * A[i * k + j];
                else
                    diag += A[i * k + j] * A[i * k + j];
        if (off <= 1e-30 * diag || off == 0.0)
            break;
        for (int p = 0; p < k; p++)
            for (int q = p + 1; q < k; q++) {
                double apq = A[p * k + q];
                if (apq == 0.0)
                    continue;
                double theta = (A[q * k + q] - A[p * k + p]) / (2.0 * apq);
                double t = (theta >= 0 ? 1.0 : -1.0) / (fabs(theta) + sqrt(theta * theta + 1.0));
                double c = 1.0 / sqrt(t * t + 1.0), s = t * c;
                for (int r = 0; r < k; r++) { /* columns p, q */
                    double arp = A[r * k + p], arq = A[r * k + q];
                    A[r * k + p] = c * arp - s * arq;
                    A[r * k + q] = s * arp + c * arq;
                }
                for (int r = 0; r < k; r++) { /* rows p, q */
                    double apr = A[p * k + r], aqr = A[q * k + r];
                    A[p * k + r] = c * apr - s * aqr;
                    A[q * k + r] = s * apr + c * aqr;
                }
                for (int r = 0; r < k; r++) {
                    double vrp = V[r * k + p], vrq = V[r * k + q];
                    V[r * k + p] = c * vrp - s * vrq;
                    V[r * k + q] = s * vrp + c * vrq;
                }
            }
    }
    /* sort ascending */
    for (int i = 0; i < k; i++)
        w[i] = A[i * k + i];
    for (int i = 1; i < k; i++)
        for (int j = i; j > 0 && w[j - 1] > w[j]; j--) {
            double t = w[j];
            w[j] = w[j - 1];
            w[j - 1] = t;
            for (int r = 0; r < k; r++) {
                double v = V[r * k + j];
                V[r * k + j] = V[r * k + j - 1];
                V[r * k + j - 1] = v;
            }
        }
}

/* The want (<= 4) largest eigenvalues of the symmetric n x n matrix G
 * (row-major; not changed) in lam, largest first, and their eigenvectors
 * in the columns of vec (n x want, row-major).
 *
 * Small matrices go straight to the Jacobi method. Larger ones use
 * subspace iteration on a block of eight vectors with a Rayleigh-Ritz step
 * (Golub and Van Loan, Matrix Computations, 4th ed., section 8.3.7), the
 * small projected problem again solved by Jacobi. Everything is our own
 * loops, so the result does not depend on how many threads the BLAS
 * library uses (LAPACKE_dsyevr, used first, changed the last bits with
 * OPENBLAS_NUM_THREADS, and through the refinement the whole structure). 60 iterations:
 * the top eigenvalues of a metric matrix of a 3D-like distance matrix stand
 * far above the rest, and the start only has to be roughly right, since
 * refinement follows (common practice, no source). */
static int leading_eigenpairs(int n, const double *G, int want, nd_rng *rng, double *lam,
                              double *vec)
{
    size_t nn = (size_t)n;
    if (n <= 8) {
        double A[64], V[64], w[8];
        memcpy(A, G, nn * nn * sizeof *A);
        jacobi_eigen(n, A, w, V);
        for (int c = 0; c < want; c++) {
            lam[c] = w[n - 1 - c];
            for (size_t i = 0; i < nn; i++)
                vec[i * (size_t)want + (size_t)c] = V[i * nn + (size_t)(n - 1 - c)];
        }
        return ND_OK;
    }
    enum { K = 8 };
    double *Q = malloc(nn * K * sizeof *Q), *Z = malloc(nn * K * sizeof *Z);
    if (!Q || !Z) {
        free(Q);
        free(Z);
        return ND_ENOMEM;
    }
    for (size_t q = 0; q < nn * K; q++)
        Q[q] = nd_rng_uniform(rng) - 0.5;
    for (int it = 0; it <= 60; it++) {
        /* orthonormalise the columns of Q: modified Gram-Schmidt, twice
         * for stability; a column that vanishes (G has low rank) is
         * replaced by a random one */
        for (int c = 0; c < K; c++) {
            for (int attempt = 0; attempt < 3; attempt++) {
                double norm0 = 0;
                for (size_t i = 0; i < nn; i++)
                    norm0 += Q[i * K + (size_t)c] * Q[i * K + (size_t)c];
                for (int pass = 0; pass < 2; pass++)
                    for (int p = 0; p < c; p++) {
                        double d = 0;
                        for (size_t i = 0; i < nn; i++)
                            d += Q[i * K + (size_t)c] * Q[i * K + (size_t)p];
                        for (size_t i = 0; i < nn; i++)
                            Q[i * K + (size_t)c] -= d * Q[i * K + (size_t)p];
                    }
                double norm = 0;
                for (size_t i = 0; i < nn; i++)
                    norm += Q[i * K + (size_t)c] * Q[i * K + (size_t)c];
                if (norm > 1e-20 * norm0 && norm > 1e-300) {
                    norm = sqrt(norm);
                    for (size_t i = 0; i < nn; i++)
                        Q[i * K + (size_t)c] /= norm;
                    break;
                }
                for (size_t i = 0; i < nn; i++)
                    Q[i * K + (size_t)c] = nd_rng_uniform(rng) - 0.5;
            }
        }
        /* Z = G Q */
        for (size_t i = 0; i < nn; i++) {
            double acc[K] = {0};
            const double *row = G + i * nn;
            for (size_t j = 0; j < nn; j++) {
                double g = row[j];
                const double *qj = Q + j * K;
                for (int c = 0; c < K; c++)
                    acc[c] += g * qj[c];
            }
            memcpy(Z + i * K, acc, sizeof acc);
        }
        if (it == 60)
            break;
        double *t = Q;
        Q = Z;
        Z = t;
    }
    /* Rayleigh-Ritz: H = Q^T G Q = Q^T Z */
    double H[K * K], w[K];
    for (int a = 0; a < K; a++)
        for (int b = 0; b < K; b++) {
            double d = 0;
            for (size_t i = 0; i < nn; i++)
                d += Q[i * K + (size_t)a] * Z[i * K + (size_t)b];
            H[a * K + b] = d;
        }
    for (int a = 0; a < K; a++)
        for (int b = a + 1; b < K; b++)
            H[a * K + b] = H[b * K + a] = 0.5 * (H[a * K + b] + H[b * K + a]);
    int rc = ND_OK;
    double V[K * K];
    jacobi_eigen(K, H, w, V);
    for (int c = 0; c < want; c++) {
        int col = K - 1 - c;
        lam[c] = w[col];
        for (size_t i = 0; i < nn; i++) {
            double v = 0;
            for (int a = 0; a < K; a++)
                v += Q[i * K + (size_t)a] * V[a * K + col];
            vec[i * (size_t)want + (size_t)c] = v;
        }
    }
    free(Q);
    free(Z);
    return rc;
}

/* Random distances within the smoothed bounds and coordinates from the
 * three leading eigenpairs of the metric matrix. work is n*n, x is 3n. */
static int metric_embed(int n, int dim, const double *lo, const double *hi, nd_rng *rng,
                        double *G, double *x)
{
    size_t nn = (size_t)n;
    /* squared random distances in G for now */
    for (size_t i = 0; i < nn; i++) {
        G[i * nn + i] = 0.0;
        for (size_t j = i + 1; j < nn; j++) {
            double l = lo[i * nn + j], u = hi[i * nn + j];
            double d = l + nd_rng_uniform(rng) * (u - l);
            G[i * nn + j] = G[j * nn + i] = d * d;
        }
    }
    double total = 0.0;
    double *row = malloc(nn * sizeof *row);
    if (!row)
        return ND_ENOMEM;
    for (size_t i = 0; i < nn; i++) {
        double s = 0.0;
        for (size_t j = 0; j < nn; j++)
            s += G[i * nn + j];
        row[i] = s;
        total += s;
    }
    total /= 2.0;
    /* D_i0^2 = (1/n) sum_j d_ij^2 - (1/n^2) sum_{j<k} d_jk^2 */
    double inv = 1.0 / (double)n;
    for (size_t i = 0; i < nn; i++)
        row[i] = row[i] * inv - total * inv * inv;
    for (size_t i = 0; i < nn; i++)
        for (size_t j = i; j < nn; j++) {
            double g = 0.5 * (row[i] + row[j] - G[i * nn + j]);
            G[i * nn + j] = G[j * nn + i] = g;
        }
    free(row);
    int want = n < dim ? n : dim;
    double lam[4] = {0, 0, 0, 0};
    double *vec = malloc(4 * nn * sizeof *vec); /* n x want, column c = eigenvector c */
    if (!vec)
        return ND_ENOMEM;
    int rc = leading_eigenpairs(n, G, want, rng, lam, vec);
    if (rc != ND_OK) {
        free(vec);
        return rc;
    }
    for (size_t i = 0; i < nn; i++)
        for (int k = 0; k < dim; k++) {
            double v = 0.0;
            if (k < want && lam[k] > 0)
                v = sqrt(lam[k]) * vec[i * (size_t)want + (size_t)k];
            /* a tiny random component keeps degenerate starts off planes */
            x[(size_t)dim * i + (size_t)k] = v + 0.01 * (nd_rng_uniform(rng) - 0.5);
        }
    free(vec);
    return ND_OK;
}

/* --------------------------------------------------------------- terms */

/* Three lowest-index neighbours of a centre, the molecule.h chirality
 * reference. Returns how many there are (up to 3). */
static int lowest3(const nd_topology *t, int c, int out[3])
{
    int k = 0;
    for (int q = t->start[c]; q < t->start[c + 1] && k < 3; q++)
        out[k++] = t->nbr[q];
    return k;
}

/* Adds the volume terms: chirality (sign and size) and planarity of sp2
 * centres, double bonds and flat rings. */
static int add_volume_terms(problem *p, const model *md, double wchir, double wflat)
{
    const nd_molecule *m = md->m;
    const nd_topology *t = &md->t;
    int rc = ND_OK;
    for (int c = 0; c < md->n && rc == ND_OK; c++) {
        int nb[3];
        if (lowest3(t, c, nb) < 3)
            continue;
        if (m->chirality[c]) {
            double l1 = md->blen[nd_topology_bond(t, c, nb[0])];
            double l2 = md->blen[nd_topology_bond(t, c, nb[1])];
            double l3 = md->blen[nd_topology_bond(t, c, nb[2])];
            /* 0.35 of the product of lengths: a tetrahedral triple product is
             * 0.77 of it, a flattened centre less (geometry) */
            double vmin = 0.35 * l1 * l2 * l3, vmax = 1.2 * l1 * l2 * l3;
            if (m->chirality[c] > 0)
                rc = add_v(p, c, nb[0], nb[1], nb[2], vmin, vmax, wchir);
            else
                rc = add_v(p, c, nb[0], nb[1], nb[2], -vmax, -vmin, wchir);
            /* with a fourth neighbour d, the other three triples too: for
             * sorted a < b < c < d, V(a,b,d), V(a,c,d), V(b,c,d) have the
             * signs -, +, - times V(a,b,c) (permutation parity). Without
             * them the fourth substituent can sit squeezed on the wrong
             * side, a strained local minimum */
            int all[4], k = 0;
            for (int q = t->start[c]; q < t->start[c + 1] && k < 4; q++)
                all[k++] = t->nbr[q];
            if (nd_topology_degree(t, c) == 4 && rc == ND_OK) {
                static const int tri[3][3] = {{0, 1, 3}, {0, 2, 3}, {1, 2, 3}};
                static const int sgn[3] = {-1, 1, -1};
                for (int q = 0; q < 3 && rc == ND_OK; q++) {
                    int s = sgn[q] * m->chirality[c];
                    double la = md->blen[nd_topology_bond(t, c, all[tri[q][0]])];
                    double lb = md->blen[nd_topology_bond(t, c, all[tri[q][1]])];
                    double lc = md->blen[nd_topology_bond(t, c, all[tri[q][2]])];
                    double lo = 0.35 * la * lb * lc, hi = 1.2 * la * lb * lc;
                    rc = add_v(p, c, all[tri[q][0]], all[tri[q][1]], all[tri[q][2]],
                               s > 0 ? lo : -hi, s > 0 ? hi : -lo, wchir);
                }
            }
        } else if (t->hyb[c] == ND_HYB_SP2 && nd_topology_degree(t, c) == 3) {
            rc = add_v(p, c, nb[0], nb[1], nb[2], -0.01, 0.01, wflat);
        }
    }
    for (int b = 0; b < m->nbonds && rc == ND_OK; b++) {
        int j = m->bonds[b].a, k = m->bonds[b].b;
        int planar = t->bond_flat[b] >= 0 ||
                     (m->bonds[b].order == ND_BOND_DOUBLE && t->hyb[j] == ND_HYB_SP2 &&
                      t->hyb[k] == ND_HYB_SP2);
        if (!planar)
            continue;
        for (int p1 = t->start[j]; p1 < t->start[j + 1] && rc == ND_OK; p1++) {
            int i = t->nbr[p1];
            if (i == k)
                continue;
            for (int q = t->start[k]; q < t->start[k + 1] && rc == ND_OK; q++) {
                int l = t->nbr[q];
                if (l == j || l == i)
                    continue;
                rc = add_v(p, j, i, k, l, -0.02, 0.02, wflat);
            }
        }
    }
    return rc;
}

/* Stage one: the distance geometry error over every pair with its smoothed
 * bounds, plus volumes. */
static int build_refine(problem *p, const model *md, int with_volumes, int dim)
{
    int n = md->n, rc = ND_OK;
    p->n = n;
    p->dg_style = 1;
    p->dim = dim;
    for (int i = 0; i < n && rc == ND_OK; i++)
        for (int j = i + 1; j < n && rc == ND_OK; j++) {
            size_t q = (size_t)i * (size_t)n + (size_t)j;
            double w = md->topo[q] == 1 ? 10.0 : md->topo[q] == 2 ? 3.0 : 1.0;
            rc = add_d(p, i, j, md->lo[q], md->hi[q], w);
        }
    if (rc == ND_OK && with_volumes)
        rc = add_volume_terms(p, md, 1.0, 1.0);
    return rc;
}

/* Stage two: the cleanup force function. Bonds and angles (as 1-3
 * distances) pulled to their targets, fixed torsions held in their 1-4
 * range, free 1-4 pairs kept off eclipsed contact, others kept apart by
 * the van der Waals lower bound; volumes as before. Force constants are
 * in arbitrary units (kcal/mol/A^2 in spirit): bonds stiffest (common
 * practice, no source). */
static int build_cleanup(problem *p, const model *md)
{
    int n = md->n, rc = ND_OK;
    const nd_molecule *m = md->m;
    p->n = n;
    p->dg_style = 0;
    p->dim = 3;
    for (int b = 0; b < m->nbonds && rc == ND_OK; b++)
        rc = add_d(p, m->bonds[b].a, m->bonds[b].b, md->blen[b], md->blen[b], 300.0);
    for (int i = 0; i < n && rc == ND_OK; i++)
        for (int j = i + 1; j < n && rc == ND_OK; j++) {
            size_t q = (size_t)i * (size_t)n + (size_t)j;
            if (md->topo[q] == 2 && md->t13[q] < 0)
                rc = add_d(p, i, j, md->lo[q], md->hi[q], 60.0);
            else if (md->topo[q] == 2)
                rc = add_d(p, i, j, md->t13[q], md->t13[q], 60.0);
            else if (md->topo[q] == 3)
                rc = add_d(p, i, j, md->t14lo[q], md->t14hi[q], 20.0);
            else if (md->topo[q] == 0)
                rc = add_d(p, i, j,
                           0.7 * (nd_embed_vdw_radius(m->z[i]) + nd_embed_vdw_radius(m->z[j])),
                           BIG_DISTANCE, 10.0);
        }
    if (rc == ND_OK)
        rc = add_volume_terms(p, md, 50.0, 50.0);
    return rc;
}

/* Minimises p from x (p->dim coordinates per atom, packed; buf holds
 * 3 * ceil(4n/3) doubles of scratch for the four-dimensional case, the
 * minimiser seeing them as ceil(dim n / 3) pseudo-atoms). Converged, step
 * limit or stall all leave the best point in x. */
static int run_minimizer(problem *p, double *x, double *buf, int max_steps, double ftol,
                         nd_error *err)
{
    nd_energy pot = {problem_energy, NULL, p};
    nd_minimize_options opt;
    nd_minimize_options_default(&opt);
    opt.stop.max_steps = max_steps;
    opt.stop.max_force = ftol;
    opt.stop.rms_force = 0.5 * ftol;
    opt.stop.energy_change = 1e-10;
    opt.stop.energy_max_force = 50 * ftol;
    opt.max_step = 0.3;
    int len = p->dim * p->n, nn = (len + 2) / 3;
    memcpy(buf, x, (size_t)len * sizeof *x);
    for (int q = len; q < 3 * nn; q++)
        buf[q] = 0.0;
    nd_error e2;
    int rc = nd_minimize(NULL, &pot, nn, buf, &opt, NULL, &e2);
    if (rc == ND_ENOMEM || rc == ND_EINVAL)
        return nd_fail(err, (nd_status)rc, "%s", e2.msg);
    memcpy(x, buf, (size_t)len * sizeof *x);
    return ND_OK;
}

/* --------------------------------------------------------------- checks */

static double dihedral(const double *x, int i, int j, int k, int l)
{
    double b1[3], b2[3], b3[3];
    for (int q = 0; q < 3; q++) {
        b1[q] = x[3 * j + q] - x[3 * i + q];
        b2[q] = x[3 * k + q] - x[3 * j + q];
        b3[q] = x[3 * l + q] - x[3 * k + q];
    }
    double n1[3] = {b1[1] * b2[2] - b1[2] * b2[1], b1[2] * b2[0] - b1[0] * b2[2],
                    b1[0] * b2[1] - b1[1] * b2[0]};
    double n2[3] = {b2[1] * b3[2] - b2[2] * b3[1], b2[2] * b3[0] - b2[0] * b3[2],
                    b2[0] * b3[1] - b2[1] * b3[0]};
    double nb2 = sqrt(b2[0] * b2[0] + b2[1] * b2[1] + b2[2] * b2[2]);
    double m1[3] = {n1[1] * b2[2] - n1[2] * b2[1], n1[2] * b2[0] - n1[0] * b2[2],
                    n1[0] * b2[1] - n1[1] * b2[0]};
    double xx = n1[0] * n2[0] + n1[1] * n2[1] + n1[2] * n2[2];
    double yy = (m1[0] * n2[0] + m1[1] * n2[1] + m1[2] * n2[2]) / (nb2 > 0 ? nb2 : 1.0);
    return atan2(yy, xx);
}

/* The check on a model (connected or not): see nd_embed_report. */
static void check_model(const model *md, const double *x, nd_embed_report *r)
{
    const nd_molecule *m = md->m;
    const nd_topology *t = &md->t;
    int n = md->n;
    memset(r, 0, sizeof *r);
    r->worst_bond_index = -1;
    r->closest_ratio = 1e9;
    r->closest_a = r->closest_b = -1;
    for (int b = 0; b < m->nbonds; b++) {
        int i = m->bonds[b].a, j = m->bonds[b].b;
        double d = 0;
        for (int k = 0; k < 3; k++)
            d += (x[3 * i + k] - x[3 * j + k]) * (x[3 * i + k] - x[3 * j + k]);
        double dev = fabs(sqrt(d) - md->blen[b]);
        if (dev > r->worst_bond || r->worst_bond_index < 0) {
            r->worst_bond = dev;
            r->worst_bond_index = b;
        }
    }
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            int tp = md->topo[(size_t)i * (size_t)n + (size_t)j];
            if (tp == 1 || tp == 2)
                continue;
            double d = 0;
            for (int k = 0; k < 3; k++)
                d += (x[3 * i + k] - x[3 * j + k]) * (x[3 * i + k] - x[3 * j + k]);
            double ratio = sqrt(d) / (nd_embed_vdw_radius(m->z[i]) + nd_embed_vdw_radius(m->z[j]));
            if (ratio < r->closest_ratio) {
                r->closest_ratio = ratio;
                r->closest_a = i;
                r->closest_b = j;
            }
        }
    for (int c = 0; c < n; c++) {
        int nb[3];
        if (lowest3(t, c, nb) < 3)
            continue;
        if (m->chirality[c]) {
            double vol = volume(x, c, nb[0], nb[1], nb[2], NULL, NULL, NULL);
            double l = 1.0;
            for (int q = 0; q < 3; q++) {
                double d = 0;
                for (int k = 0; k < 3; k++)
                    d += (x[3 * nb[q] + k] - x[3 * c + k]) * (x[3 * nb[q] + k] - x[3 * c + k]);
                l *= sqrt(d);
            }
            if (vol * m->chirality[c] < 0.2 * l)
                r->chirality_wrong++;
        } else if (t->hyb[c] == ND_HYB_SP2 && nd_topology_degree(t, c) == 3) {
            /* distance of c from the plane of its three neighbours */
            double u[3], v[3], nrm[3];
            for (int k = 0; k < 3; k++) {
                u[k] = x[3 * nb[1] + k] - x[3 * nb[0] + k];
                v[k] = x[3 * nb[2] + k] - x[3 * nb[0] + k];
            }
            nrm[0] = u[1] * v[2] - u[2] * v[1];
            nrm[1] = u[2] * v[0] - u[0] * v[2];
            nrm[2] = u[0] * v[1] - u[1] * v[0];
            double nl = sqrt(nrm[0] * nrm[0] + nrm[1] * nrm[1] + nrm[2] * nrm[2]);
            if (nl > 1e-12) {
                double h = 0;
                for (int k = 0; k < 3; k++)
                    h += (x[3 * c + k] - x[3 * nb[0] + k]) * nrm[k] / nl;
                if (fabs(h) > r->worst_flat)
                    r->worst_flat = fabs(h);
            }
        }
    }
    for (int b = 0; b < m->nbonds; b++) {
        const nd_bond *bd = &m->bonds[b];
        if (bd->order != ND_BOND_DOUBLE || bd->config == ND_DB_NONE)
            continue;
        int lj = -1, lk = -1;
        for (int q = t->start[bd->a]; q < t->start[bd->a + 1] && lj < 0; q++)
            if (t->nbr[q] != bd->b)
                lj = t->nbr[q];
        for (int q = t->start[bd->b]; q < t->start[bd->b + 1] && lk < 0; q++)
            if (t->nbr[q] != bd->a)
                lk = t->nbr[q];
        if (lj < 0 || lk < 0)
            continue;
        double phi = fabs(dihedral(x, lj, bd->a, bd->b, lk));
        int cis = phi < M_PI / 2;
        if (cis != (bd->config == ND_DB_CIS) || (phi > 30 * DEG && phi < 150 * DEG))
            r->config_wrong++;
    }
}

/* --------------------------------------------------------------- driver */

/* Embeds a connected molecule (or a single atom) into x. */
static int embed_connected(const nd_molecule *m, nd_rng *rng, const nd_embed_options *o, double *x,
                           nd_error *err)
{
    int n = m->natoms;
    if (n == 1) {
        x[0] = x[1] = x[2] = 0.0;
        return ND_OK;
    }
    model md;
    problem pd = {0}, pr = {0}, pr3 = {0}, pc = {0};
    double *G = NULL, *best = NULL, *x4 = NULL, *buf = NULL;
    int rc = model_build(&md, m, err);
    if (rc != ND_OK)
        goto out;
    smooth_bounds(n, md.lo, md.hi);
    G = malloc((size_t)n * (size_t)n * sizeof *G);
    best = malloc((size_t)(3 * n) * sizeof *best);
    x4 = malloc((size_t)(4 * n) * sizeof *x4);
    buf = malloc((size_t)(4 * n + 6) * sizeof *buf);
    if (!G || !best || !x4 || !buf) {
        rc = nd_fail(err, ND_ENOMEM, "out of memory embedding %d atoms", n);
        goto out;
    }
    if ((rc = build_refine(&pd, &md, 0, 4)) != ND_OK || (rc = build_refine(&pr, &md, 1, 4)) != ND_OK ||
        (rc = build_refine(&pr3, &md, 1, 3)) != ND_OK || (rc = build_cleanup(&pc, &md)) != ND_OK) {
        rc = nd_fail(err, ND_ENOMEM, "out of memory embedding %d atoms", n);
        goto out;
    }
    double best_score = INFINITY;
    nd_embed_report rep;
    for (int attempt = 0; attempt < o->max_attempts; attempt++) {
        rc = metric_embed(n, 4, md.lo, md.hi, rng, G, x4);
        if (rc == ND_ENOMEM) {
            rc = nd_fail(err, ND_ENOMEM, "out of memory embedding %d atoms", n);
            goto out;
        }
        if (rc != ND_OK)
            continue;
        /* mirror when most stereocentres came out inverted */
        int wrong = 0, total = 0;
        for (int c = 0; c < n; c++) {
            int nb[3];
            if (!m->chirality[c] || lowest3(&md.t, c, nb) < 3)
                continue;
            total++;
            if (volume_dim(x4, 4, c, nb[0], nb[1], nb[2], NULL, NULL, NULL) * m->chirality[c] < 0)
                wrong++;
        }
        if (2 * wrong > total)
            for (int i = 0; i < n; i++)
                x4[4 * i] = -x4[4 * i];
        /* four dimensions let atoms pass each other and centres invert
         * without going through flat or tangled states; the fourth
         * coordinate is then squeezed out (common practice in distance
         * geometry, Crippen and Havel 1988) */
        pr.w4 = 0.0;
        if ((rc = run_minimizer(&pd, x4, buf, o->max_steps, 0.05, err)) != ND_OK)
            goto out;
        if ((rc = run_minimizer(&pr, x4, buf, o->max_steps, 0.05, err)) != ND_OK)
            goto out;
        pr.w4 = 1.0;
        if ((rc = run_minimizer(&pr, x4, buf, o->max_steps, 0.05, err)) != ND_OK)
            goto out;
        for (int i = 0; i < n; i++)
            for (int k = 0; k < 3; k++)
                x[3 * i + k] = x4[4 * i + k];
        if ((rc = run_minimizer(&pr3, x, buf, o->max_steps, 0.01, err)) != ND_OK)
            goto out;
        if ((rc = run_minimizer(&pc, x, buf, o->max_steps, 1e-3, err)) != ND_OK)
            goto out;
        check_model(&md, x, &rep);
        double score = rep.chirality_wrong * 100.0 + rep.config_wrong * 100.0 + rep.worst_bond +
                       (rep.closest_ratio < o->contact_ratio ? 10.0 : 0.0) +
                       (rep.worst_flat > 0.1 ? 10.0 : 0.0);
        if (score < best_score) {
            best_score = score;
            memcpy(best, x, (size_t)(3 * n) * sizeof *x);
        }
        if (!rep.chirality_wrong && !rep.config_wrong && rep.worst_bond <= o->bond_tol &&
            rep.closest_ratio >= o->contact_ratio && rep.worst_flat <= 0.1) {
            rc = ND_OK;
            goto out;
        }
    }
    memcpy(x, best, (size_t)(3 * n) * sizeof *x);
    check_model(&md, x, &rep);
    rc = nd_fail(err, ND_ECOMPUTE,
                 "no 3D structure passed the checks in %d attempts (best: %d stereocentres wrong, "
                 "%d double bonds wrong, worst bond off by %.3f A, closest contact %.2f of the "
                 "van der Waals sum)",
                 o->max_attempts, rep.chirality_wrong, rep.config_wrong, rep.worst_bond,
                 rep.closest_ratio);
out:
    model_free(&md);
    problem_free(&pd);
    problem_free(&pr);
    problem_free(&pr3);
    problem_free(&pc);
    free(G);
    free(best);
    free(x4);
    free(buf);
    return rc;
}

/* Copies the atoms of part c (in index order, which keeps the chirality
 * reference of molecule.h) into sub; map[k] is the original index. */
static int extract_part(const nd_molecule *m, const int *component, int c, nd_molecule *sub,
                        int *map, int *local, nd_error *err)
{
    nd_molecule_init(sub);
    int rc;
    for (int i = 0; i < m->natoms; i++) {
        local[i] = -1;
        if (component[i] != c)
            continue;
        local[i] = sub->natoms;
        map[sub->natoms] = i;
        if ((rc = nd_molecule_add_atom(sub, m->z[i], 0, 0, 0, err)) != ND_OK)
            return rc;
        sub->formal_charge[local[i]] = m->formal_charge[i];
        sub->isotope[local[i]] = m->isotope[i];
        sub->chirality[local[i]] = m->chirality[i];
    }
    for (int b = 0; b < m->nbonds; b++) {
        const nd_bond *bd = &m->bonds[b];
        if (component[bd->a] != c)
            continue;
        if ((rc = nd_molecule_add_bond(sub, local[bd->a], local[bd->b], bd->order, err)) != ND_OK)
            return rc;
        sub->bonds[sub->nbonds - 1].config = bd->config;
    }
    return ND_OK;
}

int nd_embed(const nd_molecule *mol, uint64_t seed, int index, const nd_embed_options *opt,
             double *xyz, nd_error *err)
{
    nd_embed_options o;
    if (opt)
        o = *opt;
    else
        nd_embed_options_default(&o);
    if (!mol || !xyz)
        return nd_fail(err, ND_EINVAL, "nd_embed: NULL argument");
    if (mol->natoms == 0)
        return nd_fail(err, ND_EINPUT, "cannot embed a molecule with no atoms");
    if (mol->natoms > 1 && mol->nbonds == 0 && !mol->has_bonds)
        return nd_fail(err, ND_EINPUT, "cannot embed a molecule without a bond table");
    for (int b = 0; b < mol->nbonds; b++)
        if (mol->bonds[b].order == ND_BOND_AROMATIC)
            return nd_fail(err, ND_EINPUT, "bond %d-%d is aromatic: kekulise before embedding",
                           mol->bonds[b].a + 1, mol->bonds[b].b + 1);
    if (o.max_attempts < 1)
        o.max_attempts = 1;
    nd_rng rng;
    nd_rng_stream(&rng, seed, (uint64_t)index);
    nd_topology t;
    int rc = nd_topology_build(mol, &t, err);
    if (rc != ND_OK) {
        nd_topology_free(&t);
        return rc;
    }
    if (t.ncomponents == 1) {
        nd_topology_free(&t);
        return embed_connected(mol, &rng, &o, xyz, err);
    }
    int n = mol->natoms;
    int *map = malloc((size_t)n * sizeof *map), *local = malloc((size_t)n * sizeof *local);
    double *sx = malloc((size_t)(3 * n) * sizeof *sx);
    if (!map || !local || !sx) {
        rc = nd_fail(err, ND_ENOMEM, "out of memory embedding %d atoms", n);
        goto out;
    }
    double offset = 0.0;
    for (int c = 0; c < t.ncomponents; c++) {
        nd_molecule sub;
        rc = extract_part(mol, t.component, c, &sub, map, local, err);
        if (rc == ND_OK)
            rc = embed_connected(&sub, &rng, &o, sx, err);
        int ns = sub.natoms;
        nd_molecule_free(&sub);
        if (rc != ND_OK) {
            nd_error_prefix(err, "part %d", c + 1);
            goto out;
        }
        /* centre the part, then put it beside the previous ones along x */
        double cen[3] = {0, 0, 0}, rad = 0.0;
        for (int i = 0; i < ns; i++)
            for (int k = 0; k < 3; k++)
                cen[k] += sx[3 * i + k] / ns;
        for (int i = 0; i < ns; i++) {
            double d = 0;
            for (int k = 0; k < 3; k++)
                d += (sx[3 * i + k] - cen[k]) * (sx[3 * i + k] - cen[k]);
            d = sqrt(d) + nd_embed_vdw_radius(mol->z[map[i]]);
            if (d > rad)
                rad = d;
        }
        double shift = c == 0 ? 0.0 : offset + rad;
        for (int i = 0; i < ns; i++)
            for (int k = 0; k < 3; k++)
                xyz[3 * map[i] + k] = sx[3 * i + k] - cen[k] + (k == 0 ? shift : 0.0);
        offset = shift + rad + o.part_gap;
    }
    rc = ND_OK;
out:
    nd_topology_free(&t);
    free(map);
    free(local);
    free(sx);
    return rc;
}

int nd_embed_molecule(nd_molecule *mol, uint64_t seed, int index, const nd_embed_options *opt,
                      nd_error *err)
{
    if (!mol || mol->natoms == 0)
        return nd_fail(err, ND_EINPUT, "cannot embed a molecule with no atoms");
    double *x = malloc((size_t)(3 * mol->natoms) * sizeof *x);
    if (!x)
        return nd_fail(err, ND_ENOMEM, "out of memory embedding %d atoms", mol->natoms);
    int rc = nd_embed(mol, seed, index, opt, x, err);
    if (rc == ND_OK) {
        memcpy(mol->xyz, x, (size_t)(3 * mol->natoms) * sizeof *x);
        mol->dimension = 3;
    }
    free(x);
    return rc;
}

int nd_embed_check(const nd_molecule *mol, const double *xyz, nd_embed_report *rep, nd_error *err)
{
    if (!mol || !xyz || !rep)
        return nd_fail(err, ND_EINVAL, "nd_embed_check: NULL argument");
    model md;
    int rc = model_build(&md, mol, err);
    if (rc == ND_OK)
        check_model(&md, xyz, rep);
    model_free(&md);
    return rc;
}

/* Analytic test potentials and test molecules (see analytic.h). */
#include "tests/lib/analytic.h"

#include "core/elements.h"
#include "core/rng.h"

#include <ctype.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- pairs */

int nd_test_lj_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const nd_test_lj *p = ctx;
    double e = 0, s2 = p->sigma * p->sigma;
    if (g)
        memset(g, 0, 3 * (size_t)n * sizeof *g);
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double d[3], r2 = 0;
            for (int c = 0; c < 3; c++) {
                d[c] = x[3 * j + c] - x[3 * i + c];
                r2 += d[c] * d[c];
            }
            if (r2 == 0)
                return ND_ECOMPUTE;
            double sr6 = s2 * s2 * s2 / (r2 * r2 * r2);
            e += 4 * p->epsilon * (sr6 * sr6 - sr6);
            if (g) {
                /* dE/dr / r = -24 eps (2 sr12 - sr6) / r^2 */
                double f = -24 * p->epsilon * (2 * sr6 * sr6 - sr6) / r2;
                for (int c = 0; c < 3; c++) {
                    g[3 * j + c] += f * d[c];
                    g[3 * i + c] -= f * d[c];
                }
            }
        }
    *energy = e;
    return ND_OK;
}

void nd_test_lj13_icosahedron(double sigma, double *x)
{
    const double phi = (1 + sqrt(5.0)) / 2, r = pow(2.0, 1.0 / 6.0) * sigma;
    const double norm = sqrt(1 + phi * phi);
    memset(x, 0, 3 * sizeof *x);
    int k = 1;
    for (int perm = 0; perm < 3; perm++)
        for (int s1 = -1; s1 <= 1; s1 += 2)
            for (int s2 = -1; s2 <= 1; s2 += 2) {
                double v[3] = {0, s1 * 1.0, s2 * phi};
                for (int c = 0; c < 3; c++)
                    x[3 * k + (c + perm) % 3] = v[c] * r / norm;
                k++;
            }
}

int nd_test_morse_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const nd_test_morse *p = ctx;
    double e = 0;
    if (g)
        memset(g, 0, 3 * (size_t)n * sizeof *g);
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double d[3], r2 = 0;
            for (int c = 0; c < 3; c++) {
                d[c] = x[3 * j + c] - x[3 * i + c];
                r2 += d[c] * d[c];
            }
            double r = sqrt(r2);
            if (r == 0)
                return ND_ECOMPUTE;
            double ex = exp(-p->width * (r - p->r_eq));
            e += p->depth * (1 - ex) * (1 - ex);
            if (g) {
                double dr = 2 * p->depth * (1 - ex) * p->width * ex;
                for (int c = 0; c < 3; c++) {
                    g[3 * j + c] += dr * d[c] / r;
                    g[3 * i + c] -= dr * d[c] / r;
                }
            }
        }
    *energy = e;
    return ND_OK;
}

int nd_test_harmonic_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const nd_test_harmonic *p = ctx;
    double e = 0;
    for (int i = 0; i < 3 * n; i++) {
        double d = x[i] - p->center[i];
        e += 0.5 * p->k[i] * d * d;
        if (g)
            g[i] = p->k[i] * d;
    }
    *energy = e;
    return ND_OK;
}

int nd_test_rosenbrock_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const nd_test_rosenbrock *p = ctx;
    int m = 3 * n, dim = p->dim;
    if (dim < 2 || dim > m)
        return ND_EINVAL;
    double e = 0;
    if (g)
        memset(g, 0, (size_t)m * sizeof *g);
    for (int i = 0; i + 1 < dim; i++) {
        double a = x[i + 1] - x[i] * x[i], b = 1 - x[i];
        e += 100 * a * a + b * b;
        if (g) {
            g[i] += -400 * a * x[i] - 2 * b;
            g[i + 1] += 200 * a;
        }
    }
    for (int i = dim; i < m; i++) {
        e += (x[i] - 1) * (x[i] - 1);
        if (g)
            g[i] = 2 * (x[i] - 1);
    }
    *energy = e;
    return ND_OK;
}

int nd_test_faulty_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    nd_test_faulty *p = ctx;
    int call; /* this call's number, counted atomically: Hessians call in parallel */
#pragma omp atomic capture
    call = ++p->calls;
    int s = p->inner.fn(p->inner.ctx, n, x, energy, g);
    if (s == ND_OK && p->mode == 4 && call >= p->fail_at && g)
        for (int i = 0; i < 3 * n; i++)
            g[i] = -g[i];
    if (s != ND_OK || call != p->fail_at || p->mode == 4)
        return s;
    switch (p->mode) {
    case 0: return ND_ECOMPUTE;
    case 1: *energy = NAN; return ND_OK;
    case 2:
        if (g && n > 1)
            g[4] = NAN;
        return ND_OK;
    default: return ND_EDOMAIN;
    }
}

/* ------------------------------------------------- bonded molecular model */

typedef struct bterm {
    int a, b;
    double k, r0;
} bterm;
typedef struct aterm {
    int a, b, c; /* b is the vertex */
    double k, cos0;
} aterm;
typedef struct tterm {
    int a, b, c, d;
    double v;  /* barrier */
    int mult;  /* 3: V/2 (1 + cos 3 phi); 2: V/2 (1 - cos 2 phi) */
} tterm;
typedef struct pterm {
    int a, b;
    double eps, rmin;
} pterm;

struct nd_test_bonded {
    int n;
    int nb, na, nt, np;
    bterm *bonds;
    aterm *angles;
    tterm *tors;
    pterm *pairs;
};

void nd_test_bonded_free(nd_test_bonded *b)
{
    if (!b)
        return;
    free(b->bonds);
    free(b->angles);
    free(b->tors);
    free(b->pairs);
    free(b);
}

/* hybridisation class of atom i: 1 sp (triple bond or two doubles), 2 sp2, 3 sp3 */
static int hybrid(const nd_molecule *m, int i)
{
    int dbl = 0, tri = 0;
    for (int k = 0; k < m->nbonds; k++) {
        const nd_bond *bd = &m->bonds[k];
        if (bd->a != i && bd->b != i)
            continue;
        if (bd->order == ND_BOND_TRIPLE)
            tri++;
        else if (bd->order == ND_BOND_DOUBLE || bd->order == ND_BOND_AROMATIC)
            dbl++;
    }
    return tri || dbl >= 2 ? 1 : dbl ? 2 : 3;
}

int nd_test_bonded_new(nd_test_bonded **out, const nd_molecule *mol, nd_error *err)
{
    *out = NULL;
    int n = mol->natoms;
    if (n < 1 || !mol->has_bonds || mol->nbonds < 1)
        return nd_fail(err, ND_EINPUT, "bonded test potential: the molecule has no bond table");
    int *start = NULL, *adj = NULL;
    unsigned char *topo = NULL;
    nd_test_bonded *b = calloc(1, sizeof *b);
    int s = ND_ENOMEM;
    if (!b)
        goto fail;
    if ((s = nd_molecule_neighbours(mol, &start, &adj, err)) != ND_OK)
        goto fail;
    s = ND_ENOMEM;
    b->n = n;
    /* topological distance, capped at 3 (3 = "three or more") */
    topo = malloc((size_t)n * (size_t)n);
    if (!topo)
        goto fail;
    memset(topo, 3, (size_t)n * (size_t)n);
    for (int i = 0; i < n; i++) {
        topo[(size_t)i * n + i] = 0;
        for (int p = start[i]; p < start[i + 1]; p++) {
            int j = adj[p];
            topo[(size_t)i * n + j] = 1;
            for (int q = start[j]; q < start[j + 1]; q++) {
                int k = adj[q];
                if (k != i && topo[(size_t)i * n + k] > 2)
                    topo[(size_t)i * n + k] = 2;
            }
        }
    }
    b->bonds = malloc((size_t)mol->nbonds * sizeof *b->bonds);
    size_t nang = 0, ntor = 0;
    for (int j = 0; j < n; j++) {
        size_t d = (size_t)(start[j + 1] - start[j]);
        nang += d * (d > 0 ? d - 1 : 0) / 2;
    }
    for (int k = 0; k < mol->nbonds; k++) {
        int j = mol->bonds[k].a, l = mol->bonds[k].b;
        ntor += (size_t)(start[j + 1] - start[j]) * (size_t)(start[l + 1] - start[l]);
    }
    b->angles = malloc((nang + 1) * sizeof *b->angles);
    b->tors = malloc((ntor + 1) * sizeof *b->tors);
    b->pairs = malloc(((size_t)n * (size_t)n / 2 + 1) * sizeof *b->pairs);
    if (!b->bonds || !b->angles || !b->tors || !b->pairs)
        goto fail;
    for (int k = 0; k < mol->nbonds; k++) {
        const nd_bond *bd = &mol->bonds[k];
        int order = bd->order == ND_BOND_AROMATIC ? 1 : bd->order;
        double ord = bd->order == ND_BOND_AROMATIC ? 1.5 : order;
        bterm *t = &b->bonds[b->nb++];
        t->a = bd->a;
        t->b = bd->b;
        t->r0 = (nd_element_covalent_radius(mol->z[bd->a]) + nd_element_covalent_radius(mol->z[bd->b])) *
                (1 - 0.1 * (ord - 1));
        t->k = order == 1 ? (bd->order == ND_BOND_AROMATIC ? 850 : 700) : order == 2 ? 1000 : 1300;
    }
    for (int j = 0; j < n; j++) {
        int h = hybrid(mol, j);
        double t0 = h == 1 ? M_PI : h == 2 ? 2 * M_PI / 3 : acos(-1.0 / 3.0);
        for (int p = start[j]; p < start[j + 1]; p++)
            for (int q = p + 1; q < start[j + 1]; q++) {
                aterm *t = &b->angles[b->na++];
                t->a = adj[p];
                t->b = j;
                t->c = adj[q];
                t->k = 100;
                t->cos0 = cos(t0);
            }
    }
    for (int k = 0; k < mol->nbonds; k++) {
        int j = mol->bonds[k].a, l = mol->bonds[k].b, order = mol->bonds[k].order;
        int hj = hybrid(mol, j), hl = hybrid(mol, l);
        double v;
        int mult;
        if (order == ND_BOND_DOUBLE || order == ND_BOND_AROMATIC) {
            v = 10;
            mult = 2;
        } else if (order == ND_BOND_SINGLE && hj == 3 && hl == 3) {
            v = 0.3;
            mult = 3;
        } else if (order == ND_BOND_SINGLE && hj == 2 && hl == 2) {
            v = 5;
            mult = 2;
        } else {
            continue;
        }
        for (int p = start[j]; p < start[j + 1]; p++)
            for (int q = start[l]; q < start[l + 1]; q++) {
                int i = adj[p], m = adj[q];
                if (i == l || m == j || i == m)
                    continue;
                tterm *t = &b->tors[b->nt++];
                t->a = i;
                t->b = j;
                t->c = l;
                t->d = m;
                t->v = v;
                t->mult = mult;
            }
    }
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            int t = topo[(size_t)i * n + j];
            if (t < 3 && t != 0)
                continue;
            pterm *p = &b->pairs[b->np++];
            p->a = i;
            p->b = j;
            p->eps = 0.1;
            p->rmin = nd_element_covalent_radius(mol->z[i]) + nd_element_covalent_radius(mol->z[j]) + 1.6;
        }
    /* halve the exact 1-4 pairs: j bonded to i's neighbour's neighbour */
    for (int k = 0; k < b->np; k++) {
        int i = b->pairs[k].a, j = b->pairs[k].b, is14 = 0;
        for (int p = start[i]; p < start[i + 1] && !is14; p++)
            for (int q = start[j]; q < start[j + 1] && !is14; q++)
                if (topo[(size_t)adj[p] * n + adj[q]] == 1)
                    is14 = 1;
        if (is14)
            b->pairs[k].eps *= 0.5;
    }
    free(start);
    free(adj);
    free(topo);
    *out = b;
    return ND_OK;
fail:
    free(start);
    free(adj);
    free(topo);
    nd_test_bonded_free(b);
    return s == ND_ENOMEM ? nd_fail(err, ND_ENOMEM, "bonded test potential: out of memory") : s;
}

static void vsub(const double *a, const double *b, double *c)
{
    for (int k = 0; k < 3; k++)
        c[k] = a[k] - b[k];
}
static double vdot(const double *a, const double *b)
{
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
}
static void vcross(const double *a, const double *b, double *c)
{
    c[0] = a[1] * b[2] - a[2] * b[1];
    c[1] = a[2] * b[0] - a[0] * b[2];
    c[2] = a[0] * b[1] - a[1] * b[0];
}

/* Torsion phi of i-j-k-l (IUPAC sign) and its gradient (Blondel & Karplus,
 * J. Comput. Chem. 17, 1132, 1996); returns 0 with d zero when collinear. */
static int torsion(const double *xi, const double *xj, const double *xk, const double *xl, double *phi,
                   double *d)
{
    double b1[3], b2[3], b3[3], n1[3], n2[3];
    vsub(xj, xi, b1);
    vsub(xk, xj, b2);
    vsub(xl, xk, b3);
    vcross(b1, b2, n1);
    vcross(b2, b3, n2);
    double r2 = sqrt(vdot(b2, b2)), nn1 = vdot(n1, n1), nn2 = vdot(n2, n2);
    *phi = atan2(r2 * vdot(b1, n2), vdot(n1, n2));
    memset(d, 0, 12 * sizeof *d);
    if (!(r2 > 0) || !(nn1 > 1e-20) || !(nn2 > 1e-20))
        return 0;
    double p = vdot(b1, b2) / (r2 * r2), q = vdot(b3, b2) / (r2 * r2);
    for (int c = 0; c < 3; c++) {
        double di = -r2 / nn1 * n1[c], dl = r2 / nn2 * n2[c];
        d[c] = di;
        d[9 + c] = dl;
        d[3 + c] = -(1 + p) * di + q * dl;
        d[6 + c] = p * di - (1 + q) * dl;
    }
    return 1;
}

int nd_test_bonded_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const nd_test_bonded *b = ctx;
    if (n != b->n)
        return ND_EINVAL;
    double e = 0;
    if (g)
        memset(g, 0, 3 * (size_t)n * sizeof *g);
    for (int k = 0; k < b->nb; k++) {
        const bterm *t = &b->bonds[k];
        double d[3];
        vsub(x + 3 * t->b, x + 3 * t->a, d);
        double r = sqrt(vdot(d, d));
        if (r == 0)
            return ND_ECOMPUTE;
        e += 0.5 * t->k * (r - t->r0) * (r - t->r0);
        if (g)
            for (int c = 0; c < 3; c++) {
                double f = t->k * (r - t->r0) * d[c] / r;
                g[3 * t->b + c] += f;
                g[3 * t->a + c] -= f;
            }
    }
    for (int k = 0; k < b->na; k++) {
        const aterm *t = &b->angles[k];
        double u[3], v[3];
        vsub(x + 3 * t->a, x + 3 * t->b, u);
        vsub(x + 3 * t->c, x + 3 * t->b, v);
        double ru = sqrt(vdot(u, u)), rv = sqrt(vdot(v, v));
        if (ru == 0 || rv == 0)
            return ND_ECOMPUTE;
        double cs = vdot(u, v) / (ru * rv), dc = cs - t->cos0;
        e += 0.5 * t->k * dc * dc;
        if (g)
            for (int c = 0; c < 3; c++) {
                /* d cos / d u = (v^ - cos u^) / |u| */
                double gu = t->k * dc * (v[c] / rv - cs * u[c] / ru) / ru;
                double gv = t->k * dc * (u[c] / ru - cs * v[c] / rv) / rv;
                g[3 * t->a + c] += gu;
                g[3 * t->c + c] += gv;
                g[3 * t->b + c] -= gu + gv;
            }
    }
    for (int k = 0; k < b->nt; k++) {
        const tterm *t = &b->tors[k];
        double phi, d[12];
        int ok = torsion(x + 3 * t->a, x + 3 * t->b, x + 3 * t->c, x + 3 * t->d, &phi, d);
        double de;
        if (t->mult == 3) {
            e += 0.5 * t->v * (1 + cos(3 * phi));
            de = -1.5 * t->v * sin(3 * phi);
        } else {
            e += 0.5 * t->v * (1 - cos(2 * phi));
            de = t->v * sin(2 * phi);
        }
        if (g && ok) {
            const int at[4] = {t->a, t->b, t->c, t->d};
            for (int a = 0; a < 4; a++)
                for (int c = 0; c < 3; c++)
                    g[3 * at[a] + c] += de * d[3 * a + c];
        }
    }
    for (int k = 0; k < b->np; k++) {
        const pterm *t = &b->pairs[k];
        double d[3];
        vsub(x + 3 * t->b, x + 3 * t->a, d);
        double r2 = vdot(d, d);
        if (r2 == 0)
            return ND_ECOMPUTE;
        double s2 = t->rmin * t->rmin / r2, s6 = s2 * s2 * s2;
        e += t->eps * (s6 * s6 - 2 * s6);
        if (g) {
            double f = -12 * t->eps * (s6 * s6 - s6) / r2; /* dE/dr / r */
            for (int c = 0; c < 3; c++) {
                g[3 * t->b + c] += f * d[c];
                g[3 * t->a + c] -= f * d[c];
            }
        }
    }
    if (!isfinite(e))
        return ND_ECOMPUTE;
    *energy = e;
    return ND_OK;
}

/* ------------------------------------------------------ test molecules */

/* Each molecule: an optional ring template ("chair|" cyclohexane or
 * "benzene|", atoms 0-5), then heavy atoms "El<parent>" separated by
 * commas (a root atom has no parent number). Hydrogens fill each atom's
 * usual valence. */
static const struct {
    const char *name, *spec;
} MOLECULES[] = {
    {"ethane", "C,C0"},
    {"propane", "C,C0,C1"},
    {"butane", "C,C0,C1,C2"},
    {"pentane", "C,C0,C1,C2,C3"},
    {"hexane", "C,C0,C1,C2,C3,C4"},
    {"octane", "C,C0,C1,C2,C3,C4,C5,C6"},
    {"decane", "C,C0,C1,C2,C3,C4,C5,C6,C7,C8"},
    {"isobutane", "C,C0,C0,C0"},
    {"neopentane", "C,C0,C0,C0,C0"},
    {"2-methylbutane", "C,C0,C0,C2,C2"},
    {"methanol", "C,O0"},
    {"ethanol", "C,C0,O1"},
    {"1-propanol", "C,C0,C1,O2"},
    {"ethylene glycol", "O,C0,C1,O2"},
    {"dimethyl ether", "C,O0,C1"},
    {"diethyl ether", "C,C0,O1,C2,C3"},
    {"methylamine", "C,N0"},
    {"ethylamine", "C,C0,N1"},
    {"ethanethiol", "C,C0,S1"},
    {"chloroethane", "C,C0,Cl1"},
    {"1-fluoropropane", "C,C0,C1,F2"},
    {"cyclohexane", "chair|"},
    {"methylcyclohexane", "chair|C0"},
    {"cyclohexanol", "chair|O0"},
    {"benzene", "benzene|"},
    {"toluene", "benzene|C0"},
    {"phenol", "benzene|O0"},
    {"ethylbenzene", "benzene|C0,C6"},
    {"chlorobenzene", "benzene|Cl0"},
};
#define NMOLECULES ((int)(sizeof MOLECULES / sizeof MOLECULES[0]))

int nd_test_molecule_count(void)
{
    return NMOLECULES;
}

const char *nd_test_molecule_name(int i)
{
    return i >= 0 && i < NMOLECULES ? MOLECULES[i].name : NULL;
}

static int valence(int z)
{
    switch (z) {
    case 6: return 4;
    case 7: return 3;
    case 8: case 16: return 2;
    default: return 1;
    }
}

static void vnorm(double *v)
{
    double r = sqrt(vdot(v, v));
    for (int c = 0; c < 3; c++)
        v[c] /= r;
}

/* Unit vector perpendicular to u, preferring the direction of ref. */
static void perpendicular(const double *u, const double *ref, double *w)
{
    double r[3] = {ref[0], ref[1], ref[2]};
    double p = vdot(r, u);
    for (int c = 0; c < 3; c++)
        w[c] = r[c] - p * u[c];
    if (vdot(w, w) < 1e-8) {
        double alt[3] = {u[1] + 0.3, u[2] - 0.7, u[0] + 0.5};
        p = vdot(alt, u);
        for (int c = 0; c < 3; c++)
            w[c] = alt[c] - p * u[c];
    }
    vnorm(w);
}

#define GEN_MAX 64
typedef struct gen {
    int n;
    int z[GEN_MAX];
    double x[GEN_MAX][3];
    int sp2[GEN_MAX];
    double slot[GEN_MAX][4][3];
    int nslot[GEN_MAX], used[GEN_MAX];
} gen;

/* Free directions of atom a from its already placed neighbours nb[0..k-1]
 * (k = 1: tetrahedral, staggered against ref; k = 2: tetrahedral pair or
 * the trigonal bisector; k = 0: a regular tetrahedron). */
static void make_slots(gen *gd, int a, int k, const int *nb, const double *ref)
{
    double u[3][3];
    for (int i = 0; i < k; i++) {
        vsub(gd->x[nb[i]], gd->x[a], u[i]);
        vnorm(u[i]);
    }
    gd->used[a] = 0;
    if (k == 0) {
        static const double t[4][3] = {{1, 1, 1}, {-1, -1, 1}, {-1, 1, -1}, {1, -1, -1}};
        for (int s = 0; s < 4; s++)
            for (int c = 0; c < 3; c++)
                gd->slot[a][s][c] = t[s][c] / sqrt(3.0);
        gd->nslot[a] = 4;
    } else if (k == 1) {
        double w[3], v[3];
        double r[3];
        vsub(ref, gd->x[nb[0]], r);
        perpendicular(u[0], r, w);
        vcross(u[0], w, v);
        for (int s = 0; s < 3; s++) {
            double t = 2 * M_PI * s / 3;
            for (int c = 0; c < 3; c++)
                gd->slot[a][s][c] = -u[0][c] / 3 + sqrt(8.0) / 3 * (-cos(t) * w[c] + sin(t) * v[c]);
        }
        gd->nslot[a] = 3;
    } else if (gd->sp2[a]) {
        for (int c = 0; c < 3; c++)
            gd->slot[a][0][c] = -(u[0][c] + u[1][c]);
        vnorm(gd->slot[a][0]);
        gd->nslot[a] = 1;
    } else {
        double bis[3], nrm[3];
        for (int c = 0; c < 3; c++)
            bis[c] = -(u[0][c] + u[1][c]);
        vnorm(bis);
        vcross(u[0], u[1], nrm);
        vnorm(nrm);
        double ca = cos(acos(-1.0 / 3.0) / 2), sa = sin(acos(-1.0 / 3.0) / 2);
        for (int c = 0; c < 3; c++) {
            gd->slot[a][0][c] = ca * bis[c] + sa * nrm[c];
            gd->slot[a][1][c] = ca * bis[c] - sa * nrm[c];
        }
        gd->nslot[a] = 2;
    }
}

static int gen_add(gen *gd, nd_molecule *mol, int z, int parent, int order, nd_error *err)
{
    if (gd->n >= GEN_MAX)
        return nd_fail(err, ND_EINVAL, "test molecule: too many atoms");
    int a = gd->n++;
    gd->z[a] = z;
    gd->sp2[a] = 0;
    if (parent >= 0) {
        if (gd->used[parent] >= gd->nslot[parent])
            return nd_fail(err, ND_EINVAL, "test molecule: atom %d has no free direction", parent);
        const double *dir = gd->slot[parent][gd->used[parent]++];
        double r = nd_element_covalent_radius(z) + nd_element_covalent_radius(gd->z[parent]);
        for (int c = 0; c < 3; c++)
            gd->x[a][c] = gd->x[parent][c] + r * dir[c];
    } else {
        gd->x[a][0] = gd->x[a][1] = gd->x[a][2] = 0;
    }
    int s = nd_molecule_add_atom(mol, z, gd->x[a][0], gd->x[a][1], gd->x[a][2], err);
    if (s == ND_OK && parent >= 0)
        s = nd_molecule_add_bond(mol, parent, a, order, err);
    return s;
}

int nd_test_molecule_build(int i, nd_molecule *mol, nd_error *err)
{
    if (i < 0 || i >= NMOLECULES)
        return nd_fail(err, ND_EINVAL, "test molecule %d does not exist", i);
    nd_molecule_clear(mol);
    gen gd;
    memset(&gd, 0, sizeof gd);
    const char *p = MOLECULES[i].spec;
    int s, parent_of[GEN_MAX];
    if (strncmp(p, "chair|", 6) == 0 || strncmp(p, "benzene|", 8) == 0) {
        int benz = p[0] == 'b';
        p = strchr(p, '|') + 1;
        for (int k = 0; k < 6; k++) {
            double t = M_PI / 3 * k;
            double rr = benz ? 1.39 : 1.446, h = benz ? 0.0 : (k % 2 ? 0.25 : -0.25);
            gd.x[k][0] = rr * cos(t);
            gd.x[k][1] = rr * sin(t);
            gd.x[k][2] = h;
            gd.z[k] = 6;
            gd.sp2[k] = benz;
            if ((s = nd_molecule_add_atom(mol, 6, gd.x[k][0], gd.x[k][1], gd.x[k][2], err)) != ND_OK)
                return s;
            parent_of[k] = -1;
        }
        gd.n = 6;
        for (int k = 0; k < 6; k++) {
            int order = benz && k % 2 == 0 ? ND_BOND_DOUBLE : ND_BOND_SINGLE;
            if ((s = nd_molecule_add_bond(mol, k, (k + 1) % 6, order, err)) != ND_OK)
                return s;
            int nb[2] = {(k + 5) % 6, (k + 1) % 6};
            make_slots(&gd, k, 2, nb, NULL);
        }
    }
    /* heavy atoms of the tree */
    while (*p) {
        char sym[3] = {0};
        int len = 0;
        while (isalpha((unsigned char)*p) && len < 2)
            sym[len++] = *p++;
        int z = nd_element_from_symbol(sym, -1), parent = -1;
        if (isdigit((unsigned char)*p))
            parent = (int)strtol(p, (char **)&p, 10);
        if (*p == ',')
            p++;
        if (z == 0 || parent >= gd.n)
            return nd_fail(err, ND_EINVAL, "test molecule %s: bad spec", MOLECULES[i].name);
        if (parent >= 0 && gd.nslot[parent] == 0) {
            int gp = parent_of[parent];
            int nb[1] = {gp};
            if (gp < 0)
                make_slots(&gd, parent, 0, nb, NULL);
            else
                make_slots(&gd, parent, 1, nb, parent_of[gp] >= 0 ? gd.x[parent_of[gp]] : gd.x[gp]);
        }
        int a = gd.n;
        if ((s = gen_add(&gd, mol, z, parent, ND_BOND_SINGLE, err)) != ND_OK)
            return s;
        parent_of[a] = parent;
    }
    /* hydrogens */
    int heavy = gd.n;
    for (int a = 0; a < heavy; a++) {
        int nbonds = 0;
        for (int k = 0; k < mol->nbonds; k++)
            if (mol->bonds[k].a == a || mol->bonds[k].b == a)
                nbonds += mol->bonds[k].order;
        int nh = valence(gd.z[a]) - nbonds;
        if (nh <= 0)
            continue;
        if (gd.nslot[a] == 0) {
            int pa = parent_of[a];
            if (pa < 0) {
                make_slots(&gd, a, 0, NULL, NULL);
            } else {
                int nb[1] = {pa};
                /* a reference atom one bond further on, for staggering */
                int ref = parent_of[pa] >= 0 ? parent_of[pa] : -1;
                if (ref < 0)
                    for (int k = 0; k < mol->nbonds && ref < 0; k++) {
                        int o = mol->bonds[k].a == pa ? mol->bonds[k].b : mol->bonds[k].b == pa ? mol->bonds[k].a : -1;
                        if (o >= 0 && o != a)
                            ref = o;
                    }
                double fallback[3] = {gd.x[pa][0] + 0.3, gd.x[pa][1] + 1.0, gd.x[pa][2] - 0.2};
                make_slots(&gd, a, 1, nb, ref >= 0 ? gd.x[ref] : fallback);
            }
        }
        for (int h = 0; h < nh; h++)
            if ((s = gen_add(&gd, mol, 1, a, ND_BOND_SINGLE, err)) != ND_OK)
                return s;
    }
    mol->has_bonds = 1;
    mol->dimension = 3;
    return nd_molecule_set_title(mol, MOLECULES[i].name, err);
}

void nd_test_perturb(int n, double *x, double sigma, uint64_t seed)
{
    nd_rng r;
    nd_rng_seed(&r, seed);
    for (int i = 0; i < 3 * n; i++)
        x[i] += sigma * nd_rng_normal(&r);
}

double nd_test_gradient_error(const nd_energy *pot, int n, const double *x, double h)
{
    size_t n3 = 3 * (size_t)n;
    double *g = malloc(n3 * sizeof *g), *xp = malloc(n3 * sizeof *xp);
    double worst = -1, e, ep, em;
    if (!g || !xp || pot->fn(pot->ctx, n, x, &e, g) != ND_OK)
        goto done;
    memcpy(xp, x, n3 * sizeof *xp);
    worst = 0;
    for (size_t i = 0; i < n3; i++) {
        xp[i] = x[i] + h;
        int s1 = pot->fn(pot->ctx, n, xp, &ep, NULL);
        xp[i] = x[i] - h;
        int s2 = pot->fn(pot->ctx, n, xp, &em, NULL);
        xp[i] = x[i];
        if (s1 != ND_OK || s2 != ND_OK) {
            worst = -1;
            goto done;
        }
        double d = fabs((ep - em) / (2 * h) - g[i]);
        if (d > worst)
            worst = d;
    }
done:
    free(g);
    free(xp);
    return worst;
}

#include "conformers/sample.h"

#include "conformers/embed.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* One substituent of a flippable ring: the group hanging off ring atom
 * `ring_atom` through `ligand`, moved rigidly by a flip. */
typedef struct {
    int ring_atom, ligand;
    int partner;          /* index of the other ligand of the same ring atom, or -1 */
    int start, count;     /* atoms of the group in the sampler's pool */
} ligand;

typedef struct {
    nd_ring_flip pub;
    int lig_start, nlig;  /* ligands of this ring in s->ligs */
} ring;

struct nd_sampler {
    int n;
    int nrotors, nrings, ninv;
    nd_rotor *rotors;
    ring *rings;
    ligand *ligs;
    int nligs;
    int *inv;             /* inverting nitrogens */
    int *pool;            /* atom lists */
    int npool;
    unsigned char *near;  /* n * n: 1 if fewer than three bonds apart */
    double *vdw;          /* van der Waals radii */
    int *inv_nbr;         /* 3 per inverting nitrogen */
};

static const double DEG = M_PI / 180.0;

double nd_sampler_dihedral(const double *x, int a, int b, int c, int d)
{
    double b1[3], b2[3], b3[3], n1[3], n2[3], m1[3];
    for (int k = 0; k < 3; k++) {
        b1[k] = x[3 * b + k] - x[3 * a + k];
        b2[k] = x[3 * c + k] - x[3 * b + k];
        b3[k] = x[3 * d + k] - x[3 * c + k];
    }
    n1[0] = b1[1] * b2[2] - b1[2] * b2[1];
    n1[1] = b1[2] * b2[0] - b1[0] * b2[2];
    n1[2] = b1[0] * b2[1] - b1[1] * b2[0];
    n2[0] = b2[1] * b3[2] - b2[2] * b3[1];
    n2[1] = b2[2] * b3[0] - b2[0] * b3[2];
    n2[2] = b2[0] * b3[1] - b2[1] * b3[0];
    double lb2 = sqrt(b2[0] * b2[0] + b2[1] * b2[1] + b2[2] * b2[2]);
    m1[0] = n1[1] * b2[2] - n1[2] * b2[1];
    m1[1] = n1[2] * b2[0] - n1[0] * b2[2];
    m1[2] = n1[0] * b2[1] - n1[1] * b2[0];
    double xx = n1[0] * n2[0] + n1[1] * n2[1] + n1[2] * n2[2];
    double yy = (m1[0] * n2[0] + m1[1] * n2[1] + m1[2] * n2[2]) / (lb2 > 0 ? lb2 : 1);
    return atan2(yy, xx) / DEG;
}

/* Atoms reachable from `from` without crossing the bond from-avoid (avoid
 * itself never entered), written to out; returns the count, or -1 if
 * `stop` (>= 0) was reached. */
static int side(const nd_topology *t, int from, int avoid, int stop, int *out, unsigned char *seen)
{
    memset(seen, 0, (size_t)t->natoms);
    int head = 0, tail = 0;
    out[tail++] = from;
    seen[from] = 1;
    seen[avoid] = 1;
    while (head < tail) {
        int i = out[head++];
        for (int k = t->start[i]; k < t->start[i + 1]; k++) {
            int j = t->nbr[k];
            if (i == from && j == avoid)
                continue;
            if (j == stop && stop >= 0)
                return -1;
            if (seen[j])
                continue;
            seen[j] = 1;
            out[tail++] = j;
        }
    }
    return tail;
}

/* Lowest-index heavy neighbour of i other than skip (any neighbour if none
 * is heavy), or -1. */
static int reference_neighbour(const nd_molecule *m, const nd_topology *t, int i, int skip)
{
    int best = -1, besth = -1;
    for (int k = t->start[i]; k < t->start[i + 1]; k++) {
        int j = t->nbr[k];
        if (j == skip)
            continue;
        if (m->z[j] != 1 && best < 0)
            best = j;
        if (besth < 0)
            besth = j;
    }
    return best >= 0 ? best : besth;
}

/* 1 if atom x carries a double bond to O, S or N other than atom y. */
static int has_hetero_double(const nd_molecule *m, const nd_topology *t, int x, int y)
{
    for (int k = t->start[x]; k < t->start[x + 1]; k++) {
        int j = t->nbr[k];
        int zj = m->z[j];
        if (j != y && m->bonds[t->nbr_bond[k]].order == ND_BOND_DOUBLE &&
            (zj == 8 || zj == 16 || zj == 7))
            return 1;
    }
    return 0;
}

/* 1 if atom y is N, O or S with only single bonds. */
static int lone_pair_single(const nd_molecule *m, const nd_topology *t, int y)
{
    int z = m->z[y];
    if (z != 7 && z != 8 && z != 16)
        return 0;
    for (int k = t->start[y]; k < t->start[y + 1]; k++)
        if (m->bonds[t->nbr_bond[k]].order != ND_BOND_SINGLE)
            return 0;
    return 1;
}

/* Fills the kind and torsion values of rotor r. */
static void rotor_values(const nd_molecule *m, const nd_topology *t, nd_rotor *r)
{
    int hb = t->hyb[r->b], hc = t->hyb[r->c];
    int zb = m->z[r->b], zc = m->z[r->c];
    int planar = ((zb == 6 || zb == 7) && has_hetero_double(m, t, r->b, r->c) &&
                  lone_pair_single(m, t, r->c)) ||
                 ((zc == 6 || zc == 7) && has_hetero_double(m, t, r->c, r->b) &&
                  lone_pair_single(m, t, r->b));
    if (planar) {
        r->kind = ND_ROTOR_PLANAR;
        r->nvalues = 2;
        r->values[0] = 0;
        r->values[1] = 180;
    } else if (hb == ND_HYB_SP3 && hc == ND_HYB_SP3) {
        r->kind = ND_ROTOR_SP3_SP3;
        r->nvalues = 3;
        r->values[0] = 60;
        r->values[1] = 180;
        r->values[2] = 300;
    } else {
        r->kind = (hb == ND_HYB_SP3 || hc == ND_HYB_SP3) ? ND_ROTOR_SP2_SP3 : ND_ROTOR_CONJ;
        r->nvalues = 6;
        for (int k = 0; k < 6; k++)
            r->values[k] = 60.0 * k;
    }
}

int nd_sampler_new(const nd_molecule *m, const nd_topology *t, nd_sampler **out, nd_error *err)
{
    *out = NULL;
    int n = m->natoms;
    size_t nn = (size_t)(n > 0 ? n : 1);
    nd_sampler *s = calloc(1, sizeof *s);
    int *bonds = NULL, *tmp = NULL;
    unsigned char *seen = NULL;
    if (!s)
        goto nomem;
    s->n = n;
    bonds = malloc((size_t)(m->nbonds > 0 ? m->nbonds : 1) * sizeof *bonds);
    tmp = malloc(nn * sizeof *tmp);
    seen = malloc(nn);
    /* every atom appears at most once per rotor side, per ring ligand group */
    int nrot = nd_topology_rotatable_bonds(t, m, NULL);
    size_t poolcap = nn * (size_t)(nrot + 2 * t->nrings + 1);
    s->pool = malloc(poolcap * sizeof *s->pool);
    s->rotors = calloc((size_t)(nrot > 0 ? nrot : 1), sizeof *s->rotors);
    s->rings = calloc((size_t)(t->nrings > 0 ? t->nrings : 1), sizeof *s->rings);
    s->ligs = calloc(2 * (size_t)m->nbonds + 1, sizeof *s->ligs);
    s->inv = malloc(nn * sizeof *s->inv);
    s->inv_nbr = malloc(3 * nn * sizeof *s->inv_nbr);
    s->near = calloc(nn * nn, 1);
    s->vdw = malloc(nn * sizeof *s->vdw);
    if (!bonds || !tmp || !seen || !s->pool || !s->rotors || !s->rings || !s->ligs || !s->inv ||
        !s->inv_nbr || !s->near || !s->vdw)
        goto nomem;

    /* rotors */
    nd_topology_rotatable_bonds(t, m, bonds);
    for (int q = 0; q < nrot; q++) {
        int b = m->bonds[bonds[q]].a, c = m->bonds[bonds[q]].b;
        int cnt = side(t, c, b, -1, tmp, seen);
        if (cnt > n - cnt) { /* move the smaller side */
            int sw = b;
            b = c;
            c = sw;
            cnt = side(t, c, b, -1, tmp, seen);
        }
        nd_rotor *r = &s->rotors[s->nrotors++];
        r->bond = bonds[q];
        r->b = b;
        r->c = c;
        r->a = reference_neighbour(m, t, b, c);
        r->d = reference_neighbour(m, t, c, b);
        rotor_values(m, t, r);
        r->nmoving = cnt;
        memcpy(s->pool + s->npool, tmp, (size_t)cnt * sizeof *tmp);
        r->moving = s->pool + s->npool;
        s->npool += cnt;
    }

    /* ring flips */
    for (int ri = 0; ri < t->nrings; ri++) {
        int rs = t->ring_start[ri], len = t->ring_start[ri + 1] - rs;
        if (len < 5 || len > 7 || t->ring_flat[ri])
            continue;
        const int *ra = t->ring_atoms + rs;
        int ok = 1;
        for (int k = 0; k < len && ok; k++) {
            int a = ra[k];
            if (t->hyb[a] != ND_HYB_SP3 || t->atom_rings[a] != 1 ||
                (m->chirality[a] && nd_topology_degree(t, a) == 3))
                ok = 0;
        }
        if (!ok)
            continue;
        int lig0 = s->nligs, pool0 = s->npool;
        for (int k = 0; k < len && ok; k++) {
            int a = ra[k], first = -1;
            for (int e = t->start[a]; e < t->start[a + 1]; e++) {
                int l = t->nbr[e];
                if (nd_topology_ring_has(t, ri, l))
                    continue;
                int cnt = side(t, l, a, -1, tmp, seen);
                for (int q = 0; q < cnt && ok; q++)
                    if (nd_topology_ring_has(t, ri, tmp[q]))
                        ok = 0;
                if (!ok)
                    break;
                ligand *g = &s->ligs[s->nligs++];
                g->ring_atom = a;
                g->ligand = l;
                g->partner = -1;
                g->start = s->npool;
                g->count = cnt;
                memcpy(s->pool + s->npool, tmp, (size_t)cnt * sizeof *tmp);
                s->npool += cnt;
                if (first >= 0 && nd_topology_degree(t, a) == 4) {
                    g->partner = first;
                    s->ligs[first].partner = s->nligs - 1;
                }
                if (first < 0)
                    first = s->nligs - 1;
            }
        }
        if (s->nligs - lig0 > 14) /* more than two substituents per atom: not a saturated ring */
            ok = 0;
        if (!ok) { /* undo */
            s->nligs = lig0;
            s->npool = pool0;
            continue;
        }
        ring *rg = &s->rings[s->nrings++];
        rg->pub.size = len;
        rg->pub.atoms = ra;
        rg->lig_start = lig0;
        rg->nlig = s->nligs - lig0;
    }

    /* nitrogen inversion */
    for (int i = 0; i < n; i++) {
        if (m->z[i] != 7 || nd_topology_degree(t, i) != 3 || t->hyb[i] != ND_HYB_SP3 ||
            m->chirality[i])
            continue;
        int small = 0;
        for (int r = 0; r < t->nrings; r++)
            if (nd_topology_ring_has(t, r, i) && t->ring_start[r + 1] - t->ring_start[r] <= 4)
                small = 1;
        if (small)
            continue;
        for (int k = 0; k < 3; k++)
            s->inv_nbr[3 * s->ninv + k] = t->nbr[t->start[i] + k];
        s->inv[s->ninv++] = i;
    }

    /* pairs fewer than three bonds apart, for the clash screen */
    for (int i = 0; i < n; i++) {
        s->vdw[i] = nd_embed_vdw_radius(m->z[i]);
        s->near[(size_t)i * nn + (size_t)i] = 1;
        for (int e = t->start[i]; e < t->start[i + 1]; e++) {
            int j = t->nbr[e];
            s->near[(size_t)i * nn + (size_t)j] = 1;
            for (int f = t->start[j]; f < t->start[j + 1]; f++)
                s->near[(size_t)i * nn + (size_t)t->nbr[f]] = 1;
        }
    }
    free(bonds);
    free(tmp);
    free(seen);
    *out = s;
    return ND_OK;
nomem:
    free(bonds);
    free(tmp);
    free(seen);
    nd_sampler_free(s);
    return nd_fail(err, ND_ENOMEM, "out of memory preparing the conformer sampler");
}

void nd_sampler_free(nd_sampler *s)
{
    if (!s)
        return;
    free(s->rotors);
    free(s->rings);
    free(s->ligs);
    free(s->inv);
    free(s->inv_nbr);
    free(s->pool);
    free(s->near);
    free(s->vdw);
    free(s);
}

int nd_sampler_rotors(const nd_sampler *s) { return s->nrotors; }
const nd_rotor *nd_sampler_rotor(const nd_sampler *s, int i) { return &s->rotors[i]; }
int nd_sampler_flips(const nd_sampler *s) { return s->nrings; }
const nd_ring_flip *nd_sampler_flip(const nd_sampler *s, int i) { return &s->rings[i].pub; }
int nd_sampler_inversions(const nd_sampler *s) { return s->ninv; }
int nd_sampler_inversion_atom(const nd_sampler *s, int i) { return s->inv[i]; }
int nd_sampler_dimensions(const nd_sampler *s) { return s->nrotors + s->nrings + s->ninv; }

int nd_sampler_states(const nd_sampler *s, int k)
{
    return k < s->nrotors ? s->rotors[k].nvalues : 2;
}

double nd_sampler_combinations(const nd_sampler *s)
{
    double c = 1;
    for (int k = 0; k < nd_sampler_dimensions(s); k++)
        c *= nd_sampler_states(s, k);
    return c;
}

/* Rotation matrix (row-major) by angle th about unit axis u (Rodrigues). */
static void axis_rotation(const double *u, double th, double *R)
{
    double c = cos(th), sn = sin(th), v = 1 - c;
    R[0] = c + u[0] * u[0] * v;
    R[1] = u[0] * u[1] * v - u[2] * sn;
    R[2] = u[0] * u[2] * v + u[1] * sn;
    R[3] = u[1] * u[0] * v + u[2] * sn;
    R[4] = c + u[1] * u[1] * v;
    R[5] = u[1] * u[2] * v - u[0] * sn;
    R[6] = u[2] * u[0] * v - u[1] * sn;
    R[7] = u[2] * u[1] * v + u[0] * sn;
    R[8] = c + u[2] * u[2] * v;
}

void nd_sampler_set_torsion(const nd_sampler *s, int ri, double deg, double *x)
{
    const nd_rotor *r = &s->rotors[ri];
    if (r->a < 0 || r->d < 0)
        return;
    double now = nd_sampler_dihedral(x, r->a, r->b, r->c, r->d);
    double th = (deg - now) * DEG;
    double u[3], len = 0, R[9], o[3];
    for (int k = 0; k < 3; k++) {
        u[k] = x[3 * r->c + k] - x[3 * r->b + k];
        len += u[k] * u[k];
        o[k] = x[3 * r->c + k];
    }
    len = sqrt(len);
    if (len < 1e-9)
        return;
    for (int k = 0; k < 3; k++)
        u[k] /= len;
    /* With the IUPAC sign, turning the d side by -th about the b->c axis
     * (right-handed) increases the dihedral by th. */
    axis_rotation(u, -th, R);
    for (int q = 0; q < r->nmoving; q++) {
        double *p = x + 3 * r->moving[q];
        double v[3] = {p[0] - o[0], p[1] - o[1], p[2] - o[2]};
        for (int k = 0; k < 3; k++)
            p[k] = o[k] + R[3 * k] * v[0] + R[3 * k + 1] * v[1] + R[3 * k + 2] * v[2];
    }
}

/* Rotation taking unit vector u onto unit vector v (minimal angle). */
static void align_rotation(const double *u, const double *v, double *R)
{
    double k[3] = {u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]};
    double sn = sqrt(k[0] * k[0] + k[1] * k[1] + k[2] * k[2]);
    double c = u[0] * v[0] + u[1] * v[1] + u[2] * v[2];
    if (sn < 1e-12) {
        if (c > 0) {
            for (int i = 0; i < 9; i++)
                R[i] = (i % 4 == 0) ? 1 : 0;
            return;
        }
        /* half turn about any axis perpendicular to u */
        double a[3] = {1, 0, 0};
        if (fabs(u[0]) > 0.9) {
            a[0] = 0;
            a[1] = 1;
        }
        double p[3] = {u[1] * a[2] - u[2] * a[1], u[2] * a[0] - u[0] * a[2], u[0] * a[1] - u[1] * a[0]};
        double pl = sqrt(p[0] * p[0] + p[1] * p[1] + p[2] * p[2]);
        for (int i = 0; i < 3; i++)
            p[i] /= pl;
        axis_rotation(p, M_PI, R);
        return;
    }
    for (int i = 0; i < 3; i++)
        k[i] /= sn;
    axis_rotation(k, atan2(sn, c), R);
}

void nd_sampler_flip_ring(const nd_sampler *s, int i, double *x)
{
    const ring *rg = &s->rings[i];
    int len = rg->pub.size;
    const int *ra = rg->pub.atoms;
    double c[3] = {0, 0, 0}, r1[3] = {0, 0, 0}, r2[3] = {0, 0, 0};
    for (int k = 0; k < len; k++)
        for (int d = 0; d < 3; d++)
            c[d] += x[3 * ra[k] + d] / len;
    for (int k = 0; k < len; k++) {
        double ph = 2 * M_PI * k / len;
        for (int d = 0; d < 3; d++) {
            r1[d] += (x[3 * ra[k] + d] - c[d]) * sin(ph);
            r2[d] += (x[3 * ra[k] + d] - c[d]) * cos(ph);
        }
    }
    double nrm[3] = {r1[1] * r2[2] - r1[2] * r2[1], r1[2] * r2[0] - r1[0] * r2[2],
                     r1[0] * r2[1] - r1[1] * r2[0]};
    double nl = sqrt(nrm[0] * nrm[0] + nrm[1] * nrm[1] + nrm[2] * nrm[2]);
    if (nl < 1e-12)
        return;
    for (int d = 0; d < 3; d++)
        nrm[d] /= nl;
    /* old positions of the ring atoms and ligand bond vectors */
    double old_ring[3 * 7], u[3 * 14], ulen[14];
    for (int k = 0; k < len; k++)
        for (int d = 0; d < 3; d++)
            old_ring[3 * k + d] = x[3 * ra[k] + d];
    for (int g = 0; g < rg->nlig; g++) {
        const ligand *L = &s->ligs[rg->lig_start + g];
        double l2 = 0;
        for (int d = 0; d < 3; d++) {
            u[3 * g + d] = x[3 * L->ligand + d] - x[3 * L->ring_atom + d];
            l2 += u[3 * g + d] * u[3 * g + d];
        }
        ulen[g] = sqrt(l2);
    }
    /* mirror the ring atoms */
    for (int k = 0; k < len; k++) {
        double *p = x + 3 * ra[k];
        double h = (p[0] - c[0]) * nrm[0] + (p[1] - c[1]) * nrm[1] + (p[2] - c[2]) * nrm[2];
        for (int d = 0; d < 3; d++)
            p[d] -= 2 * h * nrm[d];
    }
    /* move each ligand group rigidly onto its new direction */
    for (int g = 0; g < rg->nlig; g++) {
        const ligand *L = &s->ligs[rg->lig_start + g];
        int src = L->partner >= 0 ? L->partner - rg->lig_start : g;
        double w[3], un[3], dot = 0;
        for (int d = 0; d < 3; d++)
            dot += u[3 * src + d] * nrm[d];
        double wl = 0;
        for (int d = 0; d < 3; d++) {
            w[d] = u[3 * src + d] - 2 * dot * nrm[d];
            wl += w[d] * w[d];
        }
        wl = sqrt(wl);
        if (wl < 1e-12 || ulen[g] < 1e-12)
            continue;
        for (int d = 0; d < 3; d++) {
            w[d] /= wl;
            un[d] = u[3 * g + d] / ulen[g];
        }
        double R[9];
        align_rotation(un, w, R);
        int kr = 0;
        while (ra[kr] != L->ring_atom)
            kr++;
        const double *o = old_ring + 3 * kr, *np = x + 3 * L->ring_atom;
        for (int q = 0; q < L->count; q++) {
            double *p = x + 3 * s->pool[L->start + q];
            double v[3] = {p[0] - o[0], p[1] - o[1], p[2] - o[2]};
            for (int d = 0; d < 3; d++)
                p[d] = np[d] + R[3 * d] * v[0] + R[3 * d + 1] * v[1] + R[3 * d + 2] * v[2];
        }
    }
}

void nd_sampler_invert(const nd_sampler *s, int i, double *x)
{
    const int *q = s->inv_nbr + 3 * i;
    double *p = x + 3 * s->inv[i];
    double a[3], b[3], nrm[3];
    for (int d = 0; d < 3; d++) {
        a[d] = x[3 * q[1] + d] - x[3 * q[0] + d];
        b[d] = x[3 * q[2] + d] - x[3 * q[0] + d];
    }
    nrm[0] = a[1] * b[2] - a[2] * b[1];
    nrm[1] = a[2] * b[0] - a[0] * b[2];
    nrm[2] = a[0] * b[1] - a[1] * b[0];
    double nl = sqrt(nrm[0] * nrm[0] + nrm[1] * nrm[1] + nrm[2] * nrm[2]);
    if (nl < 1e-12)
        return;
    double h = 0;
    for (int d = 0; d < 3; d++) {
        nrm[d] /= nl;
        h += (p[d] - x[3 * q[0] + d]) * nrm[d];
    }
    for (int d = 0; d < 3; d++)
        p[d] -= 2 * h * nrm[d];
}

void nd_sampler_apply(const nd_sampler *s, int k, int st, double *x)
{
    if (k < s->nrotors) {
        nd_sampler_set_torsion(s, k, s->rotors[k].values[st], x);
        return;
    }
    if (!st)
        return;
    k -= s->nrotors;
    if (k < s->nrings)
        nd_sampler_flip_ring(s, k, x);
    else
        nd_sampler_invert(s, k - s->nrings, x);
}

int nd_sampler_clash(const nd_sampler *s, const double *x, double ratio, int *pa, int *pb)
{
    size_t nn = (size_t)(s->n > 0 ? s->n : 1);
    for (int i = 0; i < s->n; i++)
        for (int j = i + 1; j < s->n; j++) {
            if (s->near[(size_t)i * nn + (size_t)j])
                continue;
            double lim = ratio * (s->vdw[i] + s->vdw[j]), d2 = 0;
            for (int k = 0; k < 3; k++) {
                double d = x[3 * i + k] - x[3 * j + k];
                d2 += d * d;
            }
            if (d2 < lim * lim) {
                if (pa)
                    *pa = i;
                if (pb)
                    *pb = j;
                return 1;
            }
        }
    return 0;
}

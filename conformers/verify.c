#include "conformers/verify.h"

#include "conformers/sample.h"
#include "core/elements.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* One kept tetrahedral configuration: atom c, its three lowest-index
 * neighbours, and the sign of their signed volume. */
typedef struct {
    int c, n1, n2, n3, sign;
} centre;

/* One kept double-bond configuration: bond ends and reference neighbours. */
typedef struct {
    int a, b, na, nb, config;
} dbond;

struct nd_verify {
    int n, nbonds;
    int *za;           /* atomic numbers */
    double *radius;    /* covalent radii */
    unsigned char *bonded; /* n * n adjacency */
    int ncentres, ndb;
    centre *centres;
    dbond *dbs;
};

double nd_verify_signed_volume(const double *x, int c, int n1, int n2, int n3)
{
    double u[3], v[3], w[3];
    for (int k = 0; k < 3; k++) {
        u[k] = x[3 * n1 + k] - x[3 * c + k];
        v[k] = x[3 * n2 + k] - x[3 * c + k];
        w[k] = x[3 * n3 + k] - x[3 * c + k];
    }
    return u[0] * (v[1] * w[2] - v[2] * w[1]) - u[1] * (v[0] * w[2] - v[2] * w[0]) +
           u[2] * (v[0] * w[1] - v[1] * w[0]);
}

/* Lowest-index neighbour of atom i other than skip, or -1. */
static int lowest_other(const nd_molecule *m, int i, int skip)
{
    int best = -1;
    for (int b = 0; b < m->nbonds; b++) {
        int o = -1;
        if (m->bonds[b].a == i)
            o = m->bonds[b].b;
        else if (m->bonds[b].b == i)
            o = m->bonds[b].a;
        if (o >= 0 && o != skip && (best < 0 || o < best))
            best = o;
    }
    return best;
}

int nd_verify_double_bond_config(const nd_molecule *m, int b, const double *x)
{
    int a = m->bonds[b].a, c = m->bonds[b].b;
    int na = lowest_other(m, a, c), nc = lowest_other(m, c, a);
    if (na < 0 || nc < 0)
        return ND_DB_NONE;
    return fabs(nd_sampler_dihedral(x, na, a, c, nc)) < 90.0 ? ND_DB_CIS : ND_DB_TRANS;
}

/* 1 if bond b lies on a cycle of the bond graph (checked by a search from
 * one end to the other that does not use b). */
static int bond_on_cycle(const nd_molecule *m, const int *start, const int *adj, int b, int *queue,
                         unsigned char *seen)
{
    int from = m->bonds[b].a, to = m->bonds[b].b;
    memset(seen, 0, (size_t)m->natoms);
    int head = 0, tail = 0;
    queue[tail++] = from;
    seen[from] = 1;
    while (head < tail) {
        int i = queue[head++];
        for (int k = start[i]; k < start[i + 1]; k++) {
            int j = adj[k];
            if ((i == from && j == to) || seen[j])
                continue;
            if (j == to)
                return 1;
            seen[j] = 1;
            queue[tail++] = j;
        }
    }
    return 0;
}

int nd_verify_new(const nd_molecule *m, const double *ref, nd_verify **out, nd_error *err)
{
    *out = NULL;
    int n = m->natoms;
    if (n > 1 && (!m->has_bonds || m->nbonds == 0))
        return nd_fail(err, ND_EINPUT, "the structure check needs a bond table");
    nd_verify *v = calloc(1, sizeof *v);
    int *start = NULL, *adj = NULL, *queue = NULL;
    unsigned char *seen = NULL;
    if (!v)
        goto nomem;
    v->n = n;
    v->nbonds = m->nbonds;
    size_t nn = (size_t)(n > 0 ? n : 1);
    v->za = malloc(nn * sizeof *v->za);
    v->radius = malloc(nn * sizeof *v->radius);
    v->bonded = calloc(nn * nn, 1);
    v->centres = malloc(nn * sizeof *v->centres);
    v->dbs = malloc((size_t)(m->nbonds > 0 ? m->nbonds : 1) * sizeof *v->dbs);
    queue = malloc(nn * sizeof *queue);
    seen = malloc(nn);
    if (!v->za || !v->radius || !v->bonded || !v->centres || !v->dbs || !queue || !seen)
        goto nomem;
    for (int i = 0; i < n; i++) {
        v->za[i] = m->z[i];
        v->radius[i] = nd_element_covalent_radius(m->z[i]);
        if (v->radius[i] <= 0)
            v->radius[i] = 1.5; /* elements beyond the table: a generous radius */
    }
    for (int b = 0; b < m->nbonds; b++) {
        int a = m->bonds[b].a, c = m->bonds[b].b;
        v->bonded[(size_t)a * nn + (size_t)c] = v->bonded[(size_t)c * nn + (size_t)a] = 1;
    }
    if (nd_molecule_neighbours(m, &start, &adj, err) != ND_OK)
        goto fail;
    for (int i = 0; i < n; i++) {
        int deg = start[i + 1] - start[i];
        if (deg < 3)
            continue;
        int sign = m->chirality[i];
        if (sign == 0 && (deg != 4 || !ref))
            continue;
        centre c = {i, adj[start[i]], adj[start[i] + 1], adj[start[i] + 2], 0};
        if (sign == 0) {
            double vol = nd_verify_signed_volume(ref, i, c.n1, c.n2, c.n3);
            if (fabs(vol) < 0.05) /* flat in the reference: nothing to keep */
                continue;
            sign = vol > 0 ? 1 : -1;
        }
        c.sign = sign > 0 ? 1 : -1;
        v->centres[v->ncentres++] = c;
    }
    for (int b = 0; b < m->nbonds; b++) {
        if (m->bonds[b].order != ND_BOND_DOUBLE)
            continue;
        if (bond_on_cycle(m, start, adj, b, queue, seen))
            continue;
        int a = m->bonds[b].a, c = m->bonds[b].b;
        int na = lowest_other(m, a, c), nc = lowest_other(m, c, a);
        if (na < 0 || nc < 0)
            continue;
        int config = m->bonds[b].config;
        if (config == ND_DB_NONE && ref)
            config = nd_verify_double_bond_config(m, b, ref);
        if (config == ND_DB_NONE)
            continue;
        v->dbs[v->ndb++] = (dbond){a, c, na, nc, config};
    }
    free(start);
    free(adj);
    free(queue);
    free(seen);
    *out = v;
    return ND_OK;
nomem:
    nd_fail(err, ND_ENOMEM, "out of memory preparing the structure check");
fail:
    free(start);
    free(adj);
    free(queue);
    free(seen);
    nd_verify_free(v);
    return err ? (int)err->code : ND_ENOMEM;
}

void nd_verify_free(nd_verify *v)
{
    if (!v)
        return;
    free(v->za);
    free(v->radius);
    free(v->bonded);
    free(v->centres);
    free(v->dbs);
    free(v);
}

nd_verify_verdict nd_verify_check(const nd_verify *v, const double *x, int *atom)
{
    size_t nn = (size_t)(v->n > 0 ? v->n : 1);
    if (atom)
        *atom = -1;
    for (int i = 0; i < v->n; i++)
        for (int j = i + 1; j < v->n; j++) {
            double dx = x[3 * i] - x[3 * j], dy = x[3 * i + 1] - x[3 * j + 1],
                   dz = x[3 * i + 2] - x[3 * j + 2];
            double d = sqrt(dx * dx + dy * dy + dz * dz), rs = v->radius[i] + v->radius[j];
            int b = v->bonded[(size_t)i * nn + (size_t)j];
            if ((b && d > rs + ND_VERIFY_BROKEN) || (!b && d < rs + ND_VERIFY_FORMED) || !isfinite(d)) {
                if (atom)
                    *atom = i;
                return ND_VERIFY_BONDING;
            }
        }
    for (int k = 0; k < v->ncentres; k++) {
        const centre *c = &v->centres[k];
        double vol = nd_verify_signed_volume(x, c->c, c->n1, c->n2, c->n3);
        if (vol * c->sign <= 0) {
            if (atom)
                *atom = c->c;
            return ND_VERIFY_STEREO;
        }
    }
    for (int k = 0; k < v->ndb; k++) {
        const dbond *d = &v->dbs[k];
        int conf = fabs(nd_sampler_dihedral(x, d->na, d->a, d->b, d->nb)) < 90.0 ? ND_DB_CIS : ND_DB_TRANS;
        if (conf != d->config) {
            if (atom)
                *atom = d->a;
            return ND_VERIFY_DOUBLE_BOND;
        }
    }
    return ND_VERIFY_OK;
}

int nd_verify_centres(const nd_verify *v) { return v->ncentres; }
int nd_verify_double_bonds(const nd_verify *v) { return v->ndb; }

const char *nd_verify_name(nd_verify_verdict v)
{
    switch (v) {
    case ND_VERIFY_OK: return "unchanged";
    case ND_VERIFY_BONDING: return "bonding changed";
    case ND_VERIFY_STEREO: return "stereocentre inverted";
    case ND_VERIFY_DOUBLE_BOND: return "double bond isomerised";
    }
    return "unknown";
}

int nd_verify_perceive_bonds(nd_molecule *m, nd_error *err)
{
    int n = m->natoms;
    for (int i = 0; i < n; i++)
        if (nd_element_covalent_radius(m->z[i]) <= 0)
            return nd_fail(err, ND_EINPUT, "atom %d (%s): no covalent radius to perceive bonds",
                           i + 1, nd_element_symbol(m->z[i]));
    m->nbonds = 0;
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double d2 = 0;
            for (int k = 0; k < 3; k++) {
                double d = m->xyz[3 * i + k] - m->xyz[3 * j + k];
                d2 += d * d;
            }
            double r = nd_element_covalent_radius(m->z[i]) + nd_element_covalent_radius(m->z[j]) +
                       ND_VERIFY_PERCEIVE;
            if (d2 < r * r) {
                int s = nd_molecule_add_bond(m, i, j, ND_BOND_SINGLE, err);
                if (s)
                    return s;
            }
        }
    m->has_bonds = 1;
    return ND_OK;
}

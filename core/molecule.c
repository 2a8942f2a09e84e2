#include "core/molecule.h"

#include "core/elements.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void nd_molecule_init(nd_molecule *m)
{
    memset(m, 0, sizeof *m);
    m->multiplicity = 1;
}

void nd_molecule_free(nd_molecule *m)
{
    if (!m)
        return;
    free(m->z);
    free(m->xyz);
    free(m->formal_charge);
    free(m->isotope);
    free(m->chirality);
    free(m->bonds);
    free(m->title);
    for (int i = 0; i < m->ndata; i++) {
        free(m->data[i].name);
        free(m->data[i].value);
    }
    free(m->data);
    nd_molecule_init(m);
}

void nd_molecule_clear(nd_molecule *m)
{
    for (int i = 0; i < m->ndata; i++) {
        free(m->data[i].name);
        free(m->data[i].value);
    }
    free(m->title);
    m->title = NULL;
    m->natoms = m->nbonds = m->ndata = 0;
    m->has_bonds = 0;
    m->charge = 0;
    m->multiplicity = 1;
    m->dimension = 0;
}

static char *dup_string(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

/* Grows the per-atom arrays to hold at least want atoms. */
static int reserve_atoms(nd_molecule *m, int want)
{
    if (want <= m->cap_atoms)
        return ND_OK;
    int cap = m->cap_atoms ? m->cap_atoms : 8;
    while (cap < want)
        cap *= 2;
    size_t c = (size_t)cap;
    int *z = realloc(m->z, c * sizeof *z);
    if (z)
        m->z = z;
    double *xyz = realloc(m->xyz, 3 * c * sizeof *xyz);
    if (xyz)
        m->xyz = xyz;
    int *q = realloc(m->formal_charge, c * sizeof *q);
    if (q)
        m->formal_charge = q;
    int *iso = realloc(m->isotope, c * sizeof *iso);
    if (iso)
        m->isotope = iso;
    int *ch = realloc(m->chirality, c * sizeof *ch);
    if (ch)
        m->chirality = ch;
    if (!z || !xyz || !q || !iso || !ch)
        return ND_ENOMEM;
    m->cap_atoms = cap;
    return ND_OK;
}

int nd_molecule_add_atom(nd_molecule *m, int z, double x, double y, double zc, nd_error *err)
{
    if (reserve_atoms(m, m->natoms + 1) != ND_OK)
        return nd_fail(err, ND_ENOMEM, "out of memory adding atom %d", m->natoms + 1);
    int i = m->natoms++;
    m->z[i] = z;
    m->xyz[3 * i] = x;
    m->xyz[3 * i + 1] = y;
    m->xyz[3 * i + 2] = zc;
    m->formal_charge[i] = 0;
    m->isotope[i] = 0;
    m->chirality[i] = 0;
    return ND_OK;
}

int nd_molecule_add_bond(nd_molecule *m, int a, int b, int order, nd_error *err)
{
    if (a < 0 || b < 0 || a >= m->natoms || b >= m->natoms)
        return nd_fail(err, ND_EINPUT, "bond %d-%d refers to an atom outside 1..%d", a + 1, b + 1,
                       m->natoms);
    if (a == b)
        return nd_fail(err, ND_EINPUT, "bond from atom %d to itself", a + 1);
    if (order < ND_BOND_SINGLE || order > ND_BOND_AROMATIC)
        return nd_fail(err, ND_EINPUT, "bond %d-%d has order %d; expected 1, 2, 3 or 4 (aromatic)",
                       a + 1, b + 1, order);
    if (m->nbonds == m->cap_bonds) {
        int cap = m->cap_bonds ? 2 * m->cap_bonds : 8;
        nd_bond *nb = realloc(m->bonds, (size_t)cap * sizeof *nb);
        if (!nb)
            return nd_fail(err, ND_ENOMEM, "out of memory adding bond %d", m->nbonds + 1);
        m->bonds = nb;
        m->cap_bonds = cap;
    }
    m->bonds[m->nbonds++] = (nd_bond){a, b, order, ND_DB_NONE};
    m->has_bonds = 1;
    return ND_OK;
}

int nd_molecule_set_title(nd_molecule *m, const char *title, nd_error *err)
{
    char *t = NULL;
    if (title && !(t = dup_string(title)))
        return nd_fail(err, ND_ENOMEM, "out of memory copying title");
    free(m->title);
    m->title = t;
    return ND_OK;
}

int nd_molecule_set_data(nd_molecule *m, const char *name, const char *value, nd_error *err)
{
    char *v = dup_string(value);
    if (!v)
        return nd_fail(err, ND_ENOMEM, "out of memory copying data item %s", name);
    for (int i = 0; i < m->ndata; i++)
        if (strcmp(m->data[i].name, name) == 0) {
            free(m->data[i].value);
            m->data[i].value = v;
            return ND_OK;
        }
    char *nm = dup_string(name);
    if (!nm) {
        free(v);
        return nd_fail(err, ND_ENOMEM, "out of memory copying data item %s", name);
    }
    if (m->ndata == m->cap_data) {
        int cap = m->cap_data ? 2 * m->cap_data : 4;
        nd_data_item *nd = realloc(m->data, (size_t)cap * sizeof *nd);
        if (!nd) {
            free(v);
            free(nm);
            return nd_fail(err, ND_ENOMEM, "out of memory adding data item %s", name);
        }
        m->data = nd;
        m->cap_data = cap;
    }
    m->data[m->ndata++] = (nd_data_item){nm, v};
    return ND_OK;
}

const char *nd_molecule_get_data(const nd_molecule *m, const char *name)
{
    for (int i = 0; i < m->ndata; i++)
        if (strcmp(m->data[i].name, name) == 0)
            return m->data[i].value;
    return NULL;
}

int nd_molecule_copy(nd_molecule *dst, const nd_molecule *src, nd_error *err)
{
    nd_molecule_free(dst);
    if (reserve_atoms(dst, src->natoms) != ND_OK)
        goto fail;
    size_t n = (size_t)src->natoms;
    if (n) {
        memcpy(dst->z, src->z, n * sizeof *dst->z);
        memcpy(dst->xyz, src->xyz, 3 * n * sizeof *dst->xyz);
        memcpy(dst->formal_charge, src->formal_charge, n * sizeof *dst->formal_charge);
        memcpy(dst->isotope, src->isotope, n * sizeof *dst->isotope);
        memcpy(dst->chirality, src->chirality, n * sizeof *dst->chirality);
    }
    dst->natoms = src->natoms;
    if (src->nbonds) {
        dst->bonds = malloc((size_t)src->nbonds * sizeof *dst->bonds);
        if (!dst->bonds)
            goto fail;
        memcpy(dst->bonds, src->bonds, (size_t)src->nbonds * sizeof *dst->bonds);
        dst->cap_bonds = dst->nbonds = src->nbonds;
    }
    dst->has_bonds = src->has_bonds;
    dst->charge = src->charge;
    dst->multiplicity = src->multiplicity;
    dst->dimension = src->dimension;
    if (src->title && nd_molecule_set_title(dst, src->title, err) != ND_OK)
        goto fail;
    for (int i = 0; i < src->ndata; i++)
        if (nd_molecule_set_data(dst, src->data[i].name, src->data[i].value, err) != ND_OK)
            goto fail;
    return ND_OK;
fail:
    nd_molecule_free(dst);
    return nd_fail(err, ND_ENOMEM, "out of memory copying a molecule");
}

double nd_molecule_mass(const nd_molecule *m)
{
    double sum = 0.0;
    for (int i = 0; i < m->natoms; i++) {
        double w = m->isotope[i] ? nd_isotope_mass(m->z[i], m->isotope[i]) : 0.0;
        sum += w > 0.0 ? w : nd_element_mass(m->z[i]);
    }
    return sum;
}

int nd_molecule_formula(const nd_molecule *m, char *buf, int size)
{
    int count[ND_MAX_Z + 1] = {0};
    for (int i = 0; i < m->natoms; i++)
        if (m->z[i] >= 1 && m->z[i] <= ND_MAX_Z)
            count[m->z[i]]++;
    /* Hill order: with carbon, C and H first; then the rest alphabetically. */
    int order[ND_MAX_Z];
    int n = 0;
    int hill = count[6] > 0;
    if (hill) {
        order[n++] = 6;
        if (count[1])
            order[n++] = 1;
    }
    int rest[ND_MAX_Z], nrest = 0;
    for (int z = 1; z <= ND_MAX_Z; z++)
        if (count[z] && !(hill && (z == 6 || z == 1)))
            rest[nrest++] = z;
    for (int i = 1; i < nrest; i++) /* insertion sort by symbol */
        for (int j = i; j > 0 && strcmp(nd_element_symbol(rest[j - 1]), nd_element_symbol(rest[j])) > 0; j--) {
            int t = rest[j];
            rest[j] = rest[j - 1];
            rest[j - 1] = t;
        }
    for (int i = 0; i < nrest; i++)
        order[n++] = rest[i];
    int len = 0;
    if (size > 0)
        buf[0] = '\0';
    for (int i = 0; i < n; i++) {
        char piece[16];
        int c = count[order[i]];
        int k = c > 1 ? snprintf(piece, sizeof piece, "%s%d", nd_element_symbol(order[i]), c)
                      : snprintf(piece, sizeof piece, "%s", nd_element_symbol(order[i]));
        if (len + k < size)
            memcpy(buf + len, piece, (size_t)k + 1);
        len += k;
    }
    return len;
}

int nd_molecule_formal_charge_sum(const nd_molecule *m)
{
    int q = 0;
    for (int i = 0; i < m->natoms; i++)
        q += m->formal_charge[i];
    return q;
}

long nd_molecule_electrons(const nd_molecule *m, int charge)
{
    long e = -(long)charge;
    for (int i = 0; i < m->natoms; i++)
        e += m->z[i];
    return e;
}

int nd_molecule_validate(const nd_molecule *m, nd_error *err)
{
    for (int i = 0; i < m->natoms; i++) {
        if (m->z[i] < 1 || m->z[i] > ND_MAX_Z)
            return nd_fail(err, ND_EINPUT, "atom %d has atomic number %d, outside 1..%d", i + 1,
                           m->z[i], ND_MAX_Z);
        for (int k = 0; k < 3; k++)
            if (!isfinite(m->xyz[3 * i + k]))
                return nd_fail(err, ND_EINPUT, "atom %d (%s) has a non-finite coordinate", i + 1,
                               nd_element_symbol(m->z[i]));
    }
    for (int b = 0; b < m->nbonds; b++) {
        const nd_bond *bd = &m->bonds[b];
        if (bd->a < 0 || bd->b < 0 || bd->a >= m->natoms || bd->b >= m->natoms || bd->a == bd->b)
            return nd_fail(err, ND_EINPUT, "bond %d joins atoms %d and %d; expected two different atoms in 1..%d",
                           b + 1, bd->a + 1, bd->b + 1, m->natoms);
    }
    return ND_OK;
}

int nd_molecule_neighbours(const nd_molecule *m, int **start_out, int **adj_out, nd_error *err)
{
    int n = m->natoms;
    int *start = calloc((size_t)n + 1, sizeof *start);
    int *adj = malloc((size_t)(2 * m->nbonds + 1) * sizeof *adj);
    int *fill = calloc((size_t)n + 1, sizeof *fill);
    if (!start || !adj || !fill) {
        free(start);
        free(adj);
        free(fill);
        return nd_fail(err, ND_ENOMEM, "out of memory building neighbour lists");
    }
    for (int b = 0; b < m->nbonds; b++) {
        start[m->bonds[b].a + 1]++;
        start[m->bonds[b].b + 1]++;
    }
    for (int i = 0; i < n; i++)
        start[i + 1] += start[i];
    for (int b = 0; b < m->nbonds; b++) {
        int a = m->bonds[b].a, c = m->bonds[b].b;
        adj[start[a] + fill[a]++] = c;
        adj[start[c] + fill[c]++] = a;
    }
    for (int i = 0; i < n; i++) /* sort each list ascending */
        for (int p = start[i] + 1; p < start[i + 1]; p++)
            for (int q = p; q > start[i] && adj[q - 1] > adj[q]; q--) {
                int t = adj[q];
                adj[q] = adj[q - 1];
                adj[q - 1] = t;
            }
    free(fill);
    *start_out = start;
    *adj_out = adj;
    return ND_OK;
}

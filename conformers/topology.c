/* Molecular topology: neighbours, parts, ring bonds, SSSR, flat rings,
 * hybridisation, rotatable bonds, stereocentres. */
#include "conformers/topology.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

void nd_topology_free(nd_topology *t)
{
    if (!t)
        return;
    free(t->start);
    free(t->nbr);
    free(t->nbr_bond);
    free(t->hyb);
    free(t->component);
    free(t->bond_in_ring);
    free(t->ring_start);
    free(t->ring_atoms);
    free(t->ring_flat);
    free(t->atom_rings);
    free(t->bond_rings);
    free(t->atom_flat);
    free(t->bond_flat);
    memset(t, 0, sizeof *t);
}

int nd_topology_bond(const nd_topology *t, int a, int b)
{
    for (int k = t->start[a]; k < t->start[a + 1]; k++)
        if (t->nbr[k] == b)
            return t->nbr_bond[k];
    return -1;
}

int nd_topology_degree(const nd_topology *t, int i)
{
    return t->start[i + 1] - t->start[i];
}

int nd_topology_ring_has(const nd_topology *t, int r, int i)
{
    for (int k = t->ring_start[r]; k < t->ring_start[r + 1]; k++)
        if (t->ring_atoms[k] == i)
            return 1;
    return 0;
}

int nd_topology_angle_ring(const nd_topology *t, int a, int b, int c)
{
    int best = 0;
    for (int r = 0; r < t->nrings; r++) {
        int s = t->ring_start[r], len = t->ring_start[r + 1] - s;
        if (best && len >= best)
            continue;
        for (int k = 0; k < len; k++) {
            if (t->ring_atoms[s + k] != b)
                continue;
            int prev = t->ring_atoms[s + (k + len - 1) % len];
            int next = t->ring_atoms[s + (k + 1) % len];
            if ((prev == a && next == c) || (prev == c && next == a))
                best = len;
        }
    }
    return best;
}

int nd_topology_bond_ring(const nd_topology *t, int b)
{
    int best = 0;
    for (int r = 0; r < t->nrings; r++) {
        int s = t->ring_start[r], len = t->ring_start[r + 1] - s;
        if (best && len >= best)
            continue;
        for (int k = 0; k < len; k++) {
            int x = t->ring_atoms[s + k], y = t->ring_atoms[s + (k + 1) % len];
            if (nd_topology_bond(t, x, y) == b) {
                best = len;
                break;
            }
        }
    }
    return best;
}

/* Marks bonds on cycles (non-bridges) by an iterative lowlink search. */
static int find_ring_bonds(nd_topology *t)
{
    int n = t->natoms;
    int *disc = malloc((size_t)n * sizeof *disc), *low = malloc((size_t)n * sizeof *low);
    int *stk = malloc((size_t)n * sizeof *stk), *it = malloc((size_t)n * sizeof *it);
    int *inb = malloc((size_t)n * sizeof *inb);
    if (!disc || !low || !stk || !it || !inb) {
        free(disc); free(low); free(stk); free(it); free(inb);
        return ND_ENOMEM;
    }
    for (int i = 0; i < n; i++) {
        disc[i] = -1;
        it[i] = t->start[i];
    }
    int time = 0;
    for (int r = 0; r < n; r++) {
        if (disc[r] >= 0)
            continue;
        int sp = 0;
        stk[sp++] = r;
        disc[r] = low[r] = time++;
        inb[r] = -1;
        while (sp) {
            int u = stk[sp - 1];
            if (it[u] < t->start[u + 1]) {
                int v = t->nbr[it[u]], b = t->nbr_bond[it[u]];
                it[u]++;
                if (b == inb[u])
                    continue;
                if (disc[v] < 0) {
                    disc[v] = low[v] = time++;
                    inb[v] = b;
                    stk[sp++] = v;
                } else {
                    t->bond_in_ring[b] = 1;
                    if (disc[v] < low[u])
                        low[u] = disc[v];
                }
            } else if (--sp > 0) {
                int par = stk[sp - 1];
                if (low[u] < low[par])
                    low[par] = low[u];
                if (low[u] <= disc[par])
                    t->bond_in_ring[inb[u]] = 1;
            }
        }
    }
    free(disc); free(low); free(stk); free(it); free(inb);
    return ND_OK;
}

typedef struct {
    int len;
    int off;  /* offset of its atoms in the candidate atom pool */
    int vec;  /* offset of its bond bitset */
} cand;

/* Orders ring candidates by size, then by when they were found. */
static int cmp_cand(const void *a, const void *b)
{
    const cand *x = a, *y = b;
    if (x->len != y->len)
        return x->len - y->len;
    return x->off - y->off;
}

/* Smallest set of smallest rings. Candidates are the fundamental cycles of
 * breadth-first trees grown from every ring atom (each non-tree ring bond
 * x-y whose two tree paths meet only at the root), which contain a minimum
 * cycle basis (J. D. Horton, SIAM J. Comput. 16, 358, 1987); the shortest
 * linearly independent ones over GF(2) are kept (Gaussian elimination on
 * bond incidence vectors) until there are nbonds - natoms + ncomponents. */
static int find_sssr(nd_topology *t)
{
    int n = t->natoms, nb = t->nbonds;
    int want = nb - n + t->ncomponents;
    t->ring_start = calloc((size_t)(want > 0 ? want : 0) + 1, sizeof *t->ring_start);
    if (!t->ring_start)
        return ND_ENOMEM;
    t->nrings = 0;
    if (want <= 0) {
        t->ring_atoms = malloc(sizeof *t->ring_atoms);
        return t->ring_atoms ? ND_OK : ND_ENOMEM;
    }
    int words = (nb + 63) / 64;
    int rc = ND_ENOMEM;
    int *par = malloc((size_t)n * sizeof *par), *parb = malloc((size_t)n * sizeof *parb);
    int *depth = malloc((size_t)n * sizeof *depth), *queue = malloc((size_t)n * sizeof *queue);
    int *mark = calloc((size_t)n, sizeof *mark);
    int cap_c = 64, ncand = 0, cap_pool = 1024, npool = 0, cap_vec = 64 * words, nvec = 0;
    cand *cands = malloc((size_t)cap_c * sizeof *cands);
    int *pool = malloc((size_t)cap_pool * sizeof *pool);
    uint64_t *vecs = malloc((size_t)cap_vec * sizeof *vecs);
    uint64_t *basis = malloc((size_t)(want * words) * sizeof *basis);
    int *pivot = malloc((size_t)want * sizeof *pivot);
    uint64_t *v = malloc((size_t)words * sizeof *v);
    int *chosen = malloc((size_t)want * sizeof *chosen);
    if (!par || !parb || !depth || !queue || !mark || !cands || !pool || !vecs || !basis ||
        !pivot || !v || !chosen)
        goto out;
    int stamp = 0;
    for (int r = 0; r < n; r++) {
        int has_ring = 0;
        for (int k = t->start[r]; k < t->start[r + 1]; k++)
            if (t->bond_in_ring[t->nbr_bond[k]])
                has_ring = 1;
        if (!has_ring)
            continue;
        for (int i = 0; i < n; i++)
            depth[i] = -1;
        int qh = 0, qt = 0;
        queue[qt++] = r;
        depth[r] = 0;
        par[r] = -1;
        parb[r] = -1;
        while (qh < qt) {
            int u = queue[qh++];
            for (int k = t->start[u]; k < t->start[u + 1]; k++) {
                int w = t->nbr[k], b = t->nbr_bond[k];
                if (!t->bond_in_ring[b] || depth[w] >= 0)
                    continue;
                depth[w] = depth[u] + 1;
                par[w] = u;
                parb[w] = b;
                queue[qt++] = w;
            }
        }
        /* non-tree ring bonds, each seen once (from its lower end x < y) */
        for (int qi = 0; qi < qt; qi++) {
            int x = queue[qi];
            for (int k = t->start[x]; k < t->start[x + 1]; k++) {
                int y = t->nbr[k], b = t->nbr_bond[k];
                if (!t->bond_in_ring[b] || y < x || parb[x] == b || parb[y] == b || depth[y] < 0)
                    continue;
                /* paths x->r and y->r must meet only at r */
                stamp++;
                for (int a = x; a != -1; a = par[a])
                    mark[a] = stamp;
                int ok = 1;
                for (int a = y; a != r; a = par[a])
                    if (mark[a] == stamp) {
                        ok = 0;
                        break;
                    }
                if (!ok)
                    continue;
                int len = depth[x] + depth[y] + 1;
                if (ncand == cap_c) {
                    cap_c *= 2;
                    cand *nc = realloc(cands, (size_t)cap_c * sizeof *nc);
                    if (!nc)
                        goto out;
                    cands = nc;
                }
                while (npool + len > cap_pool) {
                    cap_pool *= 2;
                    int *np = realloc(pool, (size_t)cap_pool * sizeof *np);
                    if (!np)
                        goto out;
                    pool = np;
                }
                while (nvec + words > cap_vec) {
                    cap_vec *= 2;
                    uint64_t *nv = realloc(vecs, (size_t)cap_vec * sizeof *nv);
                    if (!nv)
                        goto out;
                    vecs = nv;
                }
                cand *c = &cands[ncand++];
                c->len = len;
                c->off = npool;
                c->vec = nvec;
                uint64_t *bits = vecs + nvec;
                memset(bits, 0, (size_t)words * sizeof *bits);
                nvec += words;
                /* atoms: x up to r, then down to y */
                int m = 0;
                for (int a = x; a != -1; a = par[a])
                    pool[npool + m++] = a;
                int tail = npool + len - 1;
                for (int a = y; a != r; a = par[a])
                    pool[tail--] = a;
                npool += len;
                bits[b / 64] |= (uint64_t)1 << (b % 64);
                for (int a = x; a != r; a = par[a])
                    bits[parb[a] / 64] |= (uint64_t)1 << (parb[a] % 64);
                for (int a = y; a != r; a = par[a])
                    bits[parb[a] / 64] |= (uint64_t)1 << (parb[a] % 64);
            }
        }
    }
    qsort(cands, (size_t)ncand, sizeof *cands, cmp_cand);
    int rank = 0, total_atoms = 0;
    for (int ci = 0; ci < ncand && rank < want; ci++) {
        memcpy(v, vecs + cands[ci].vec, (size_t)words * sizeof *v);
        for (int r = 0; r < rank; r++)
            if (v[pivot[r] / 64] >> (pivot[r] % 64) & 1)
                for (int w = 0; w < words; w++)
                    v[w] ^= basis[r * words + w];
        int p = -1;
        for (int w = 0; w < words && p < 0; w++)
            if (v[w])
                p = w * 64 + __builtin_ctzll(v[w]);
        if (p < 0)
            continue;
        memcpy(basis + rank * words, v, (size_t)words * sizeof *v);
        pivot[rank] = p;
        chosen[rank++] = ci;
        total_atoms += cands[ci].len;
    }
    t->ring_atoms = malloc((size_t)(total_atoms + 1) * sizeof *t->ring_atoms);
    if (!t->ring_atoms)
        goto out;
    int off = 0;
    for (int r = 0; r < rank; r++) {
        const cand *c = &cands[chosen[r]];
        t->ring_start[r] = off;
        memcpy(t->ring_atoms + off, pool + c->off, (size_t)c->len * sizeof *pool);
        off += c->len;
    }
    t->ring_start[rank] = off;
    t->nrings = rank;
    rc = ND_OK;
out:
    free(par); free(parb); free(depth); free(queue); free(mark); free(cands); free(pool);
    free(vecs); free(basis); free(pivot); free(v); free(chosen);
    return rc;
}

/* A lone-pair donor that can sit in a flat ring: N, O, S, Se, P (or a
 * negatively charged C) with only single bonds and at most three
 * neighbours. */
static int lone_pair_donor(const nd_molecule *m, const nd_topology *t, int i)
{
    int z = m->z[i];
    if (!(z == 7 || z == 8 || z == 16 || z == 34 || z == 15 || (z == 6 && m->formal_charge[i] < 0)))
        return 0;
    if (nd_topology_degree(t, i) > 3)
        return 0;
    for (int k = t->start[i]; k < t->start[i + 1]; k++)
        if (m->bonds[t->nbr_bond[k]].order != ND_BOND_SINGLE)
            return 0;
    return 1;
}

/* Hybridisation from the bond orders: sp with a triple bond or two double
 * bonds on a two-coordinate atom; sp2 with one double bond (three or fewer
 * neighbours), or for N and O with single bonds next to a C or N that has a
 * multiple bond (amides, anilines, enol ethers, esters: conjugated lone
 * pair), and for atoms in flat rings; otherwise sp3. Atoms of row 3 and
 * below with four or more neighbours (sulfones, phosphates) are sp3. */
static void assign_hybridisation(const nd_molecule *m, nd_topology *t)
{
    int n = t->natoms;
    for (int i = 0; i < n; i++) {
        int deg = nd_topology_degree(t, i), ndouble = 0, ntriple = 0;
        for (int k = t->start[i]; k < t->start[i + 1]; k++) {
            int o = m->bonds[t->nbr_bond[k]].order;
            ndouble += o == ND_BOND_DOUBLE || o == ND_BOND_AROMATIC;
            ntriple += o == ND_BOND_TRIPLE;
        }
        int h;
        if (deg < 2)
            h = ND_HYB_NONE;
        else if (deg >= 4)
            h = ND_HYB_SP3;
        else if (ntriple || (ndouble >= 2 && deg == 2))
            h = ND_HYB_SP;
        else if (ndouble && (m->z[i] <= 10 || deg == 2))
            h = ND_HYB_SP2;
        else
            h = ND_HYB_SP3;
        if (h == ND_HYB_SP3 && (m->z[i] == 7 || m->z[i] == 8) && deg <= 3 &&
            m->formal_charge[i] <= 0) {
            for (int k = t->start[i]; k < t->start[i + 1]; k++) {
                int j = t->nbr[k];
                if (m->z[j] != 6 && m->z[j] != 7)
                    continue;
                for (int l = t->start[j]; l < t->start[j + 1]; l++) {
                    int o = m->bonds[t->nbr_bond[l]].order;
                    if (o == ND_BOND_DOUBLE || o == ND_BOND_TRIPLE || o == ND_BOND_AROMATIC)
                        h = ND_HYB_SP2;
                }
            }
        }
        t->hyb[i] = h;
    }
    /* flat rings */
    for (int r = 0; r < t->nrings; r++) {
        int s = t->ring_start[r], len = t->ring_start[r + 1] - s, flat = len >= 3 && len <= 7;
        for (int k = 0; k < len && flat; k++) {
            int a = t->ring_atoms[s + k];
            if (t->hyb[a] != ND_HYB_SP2 && !lone_pair_donor(m, t, a))
                flat = 0;
        }
        /* a donor needs a conjugated neighbour in the ring on both sides */
        for (int k = 0; k < len && flat; k++) {
            int a = t->ring_atoms[s + k];
            if (t->hyb[a] == ND_HYB_SP2)
                continue;
            int p = t->ring_atoms[s + (k + len - 1) % len], q = t->ring_atoms[s + (k + 1) % len];
            if (t->hyb[p] != ND_HYB_SP2 || t->hyb[q] != ND_HYB_SP2)
                flat = 0;
        }
        t->ring_flat[r] = flat;
        if (!flat)
            continue;
        for (int k = 0; k < len; k++) {
            int a = t->ring_atoms[s + k], c = t->ring_atoms[s + (k + 1) % len];
            t->atom_flat[a] = 1;
            if (t->hyb[a] == ND_HYB_SP3)
                t->hyb[a] = ND_HYB_SP2;
            int b = nd_topology_bond(t, a, c);
            if (b >= 0 && t->bond_flat[b] < 0)
                t->bond_flat[b] = r;
        }
    }
}

int nd_topology_build(const nd_molecule *m, nd_topology *t, nd_error *err)
{
    memset(t, 0, sizeof *t);
    int n = m->natoms, nb = m->nbonds;
    t->natoms = n;
    t->nbonds = nb;
    for (int b = 0; b < nb; b++)
        if (m->bonds[b].a < 0 || m->bonds[b].a >= n || m->bonds[b].b < 0 || m->bonds[b].b >= n ||
            m->bonds[b].a == m->bonds[b].b)
            return nd_fail(err, ND_EINPUT, "bond %d refers to atoms %d-%d outside 1..%d", b + 1,
                           m->bonds[b].a + 1, m->bonds[b].b + 1, n);
    size_t nn = (size_t)n + 1, nbs = (size_t)nb + 1;
    t->start = calloc(nn + 1, sizeof *t->start);
    t->nbr = malloc(2 * nbs * sizeof *t->nbr);
    t->nbr_bond = malloc(2 * nbs * sizeof *t->nbr_bond);
    t->hyb = calloc(nn, sizeof *t->hyb);
    t->component = malloc(nn * sizeof *t->component);
    t->bond_in_ring = calloc(nbs, sizeof *t->bond_in_ring);
    t->atom_rings = calloc(nn, sizeof *t->atom_rings);
    t->bond_rings = calloc(nbs, sizeof *t->bond_rings);
    t->atom_flat = calloc(nn, sizeof *t->atom_flat);
    t->bond_flat = malloc(nbs * sizeof *t->bond_flat);
    int *fill = malloc(nn * sizeof *fill);
    if (!t->start || !t->nbr || !t->nbr_bond || !t->hyb || !t->component || !t->bond_in_ring ||
        !t->atom_rings || !t->bond_rings || !t->atom_flat || !t->bond_flat || !fill)
        goto nomem;
    for (int b = 0; b < nb; b++) {
        t->start[m->bonds[b].a + 1]++;
        t->start[m->bonds[b].b + 1]++;
        t->bond_flat[b] = -1;
    }
    for (int i = 0; i < n; i++)
        t->start[i + 1] += t->start[i];
    for (int i = 0; i < n; i++)
        fill[i] = t->start[i];
    for (int b = 0; b < nb; b++) {
        int a = m->bonds[b].a, c = m->bonds[b].b;
        t->nbr[fill[a]] = c;
        t->nbr_bond[fill[a]++] = b;
        t->nbr[fill[c]] = a;
        t->nbr_bond[fill[c]++] = b;
    }
    /* sort each list ascending (insertion sort: lists are short) */
    for (int i = 0; i < n; i++)
        for (int k = t->start[i] + 1; k < t->start[i + 1]; k++)
            for (int j = k; j > t->start[i] && t->nbr[j - 1] > t->nbr[j]; j--) {
                int x = t->nbr[j], y = t->nbr_bond[j];
                t->nbr[j] = t->nbr[j - 1];
                t->nbr_bond[j] = t->nbr_bond[j - 1];
                t->nbr[j - 1] = x;
                t->nbr_bond[j - 1] = y;
            }
    for (int i = 0; i < n; i++)
        for (int k = t->start[i] + 1; k < t->start[i + 1]; k++)
            if (t->nbr[k] == t->nbr[k - 1]) {
                free(fill);
                return nd_fail(err, ND_EINPUT, "two bonds between atoms %d and %d", i + 1,
                               t->nbr[k] + 1);
            }
    /* parts, by a breadth-first sweep reusing fill as the queue */
    for (int i = 0; i < n; i++)
        t->component[i] = -1;
    for (int r = 0; r < n; r++) {
        if (t->component[r] >= 0)
            continue;
        int qh = 0, qt = 0, c = t->ncomponents++;
        fill[qt++] = r;
        t->component[r] = c;
        while (qh < qt) {
            int u = fill[qh++];
            for (int k = t->start[u]; k < t->start[u + 1]; k++)
                if (t->component[t->nbr[k]] < 0) {
                    t->component[t->nbr[k]] = c;
                    fill[qt++] = t->nbr[k];
                }
        }
    }
    free(fill);
    fill = NULL;
    if (find_ring_bonds(t) != ND_OK || find_sssr(t) != ND_OK)
        goto nomem;
    t->ring_flat = calloc((size_t)t->nrings + 1, sizeof *t->ring_flat);
    if (!t->ring_flat)
        goto nomem;
    for (int r = 0; r < t->nrings; r++) {
        int s = t->ring_start[r], len = t->ring_start[r + 1] - s;
        for (int k = 0; k < len; k++) {
            int a = t->ring_atoms[s + k], c = t->ring_atoms[s + (k + 1) % len];
            t->atom_rings[a]++;
            int b = nd_topology_bond(t, a, c);
            if (b >= 0)
                t->bond_rings[b]++;
        }
    }
    assign_hybridisation(m, t);
    return ND_OK;
nomem:
    free(fill);
    return nd_fail(err, ND_ENOMEM, "out of memory building the topology of %d atoms", n);
}

int nd_topology_is_rotatable(const nd_topology *t, const nd_molecule *m, int b)
{
    const nd_bond *bd = &m->bonds[b];
    if (bd->order != ND_BOND_SINGLE || t->bond_in_ring[b])
        return 0;
    if (t->hyb[bd->a] == ND_HYB_SP || t->hyb[bd->b] == ND_HYB_SP)
        return 0;
    int ends[2] = {bd->a, bd->b};
    for (int e = 0; e < 2; e++) {
        int x = ends[e], y = ends[1 - e], heavy = 0;
        for (int k = t->start[x]; k < t->start[x + 1]; k++)
            if (t->nbr[k] != y && m->z[t->nbr[k]] != 1)
                heavy++;
        if (!heavy)
            return 0;
    }
    return 1;
}

int nd_topology_rotatable_bonds(const nd_topology *t, const nd_molecule *m, int *out)
{
    int count = 0;
    for (int b = 0; b < m->nbonds; b++)
        if (nd_topology_is_rotatable(t, m, b)) {
            if (out)
                out[count] = b;
            count++;
        }
    return count;
}

void nd_topology_stereo(const nd_molecule *m, int *atoms, int *natoms_out, int *bonds,
                        int *nbonds_out)
{
    int na = 0, nb = 0;
    for (int i = 0; i < m->natoms; i++)
        if (m->chirality[i]) {
            if (atoms)
                atoms[na] = i;
            na++;
        }
    for (int b = 0; b < m->nbonds; b++)
        if (m->bonds[b].order == ND_BOND_DOUBLE && m->bonds[b].config != ND_DB_NONE) {
            if (bonds)
                bonds[nb] = b;
            nb++;
        }
    if (natoms_out)
        *natoms_out = na;
    if (nbonds_out)
        *nbonds_out = nb;
}
